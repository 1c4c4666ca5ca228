"""gatescope: quantum process tomography from laboratory counts.

The public API (CONTRACT §6)::

    import gatescope as gs
    exp = gs.read_experiment("experiment.toml")
    res = gs.fit(exp, method="mle")
    res.save("result.h5")
    res2 = gs.load_result("result.h5")

Conventions (Choi, chi, Pauli transfer matrix, labels, wave plates) are
stated in :mod:`gatescope.conventions` and :mod:`gatescope.channels`.
"""

from importlib import metadata as _metadata

from .api import fit
from .errors import GatescopeWarning, InputError
from .experiment import Experiment, read_experiment
from .results import Figure, Result, load_result

try:
    __version__ = _metadata.version("gatescope")
except _metadata.PackageNotFoundError:  # running from a source tree without install
    __version__ = "0+unknown"

__all__ = ["fit", "read_experiment", "load_result", "Experiment", "Result", "Figure",
           "InputError", "GatescopeWarning", "__version__"]
