"""gatescope: quantum process (and state) tomography from laboratory counts.

The public API (README, "Python API")::

    import gatescope as gs
    exp = gs.read_experiment("experiment.toml")
    res = gs.fit(exp, method="mle")
    res.save("result.h5")
    res2 = gs.load_result("result.h5")

The modules at this level follow the data, one step each: `reader` →
`model` → `likelihood` → `projection` → `estimators` → `merit` (figures of
merit) → `intervals`, `bootstrap` → `diagnostics` → `result_file`,
`result` → `pipeline`; `summary` and `cli` present it. Capabilities built
on the pipeline live in subpackages that this level never imports
(`synth`: simulation and the run sheet; `batch`: overnight batches). A
state experiment (``kind = "state"``) goes through the same steps with the
state model of `model` and the state figures of `merit`. Conventions (Choi,
chi, Pauli transfer matrix, labels, wave plates) are stated in the README
and in :mod:`gatescope.conventions` and :mod:`gatescope.channels`.
"""

from importlib import metadata as _metadata

from .errors import GatescopeWarning, InputError, NumericalError
from .intervals import Figure
from .pipeline import fit
from .reader import Experiment, read_experiment
from .result import Result, load_result

try:
    __version__ = _metadata.version("gatescope")
except _metadata.PackageNotFoundError:  # running from a source tree without install
    __version__ = "0+unknown"

__all__ = ["fit", "read_experiment", "load_result", "Experiment", "Result", "Figure",
           "InputError", "NumericalError", "GatescopeWarning", "__version__"]
