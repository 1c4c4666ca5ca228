"""The imperfections of a real two-photon polarisation bench, for simulated data.

Four kinds, each a pure function of its parameters (and of a seed where
something is drawn), named in a channel SPEC (`gatescope.synth.noise`,
README "Noise that labs have"):

1. **Partial two-photon distinguishability** in the postselected
   linear-optics controlled-Z (:func:`distinguishable_cz`,
   :func:`distinguishability_gate`): a change of the *process*, which
   becomes trace decreasing.
2. **Wave-plate errors** (:class:`PlateErrors`, :func:`actual_optics`): the
   preparation and analysis optics make slightly different states and
   effects from the ideal ones the experiment file names.
3. **Accidental coincidences and dark counts** (:func:`accidental_rate`,
   :func:`accidental_background`): a background in every row.
4. **Source drift** (:func:`drift_factors`): the intensity changes over the
   acquisition order of the rows.

Only the first changes the process; the other three change how the counts
arise, while the experiment file keeps the ideal labels and a constant
intensity (a fit then assumes ideal optics and a steady source, as a lab
that does not know better would). The accidental background is the
exception: a lab knows it and states it, so the simulated experiment
writes it as its ``background`` column. `gatescope.synth.simulate` turns
these into expected and drawn counts.

Safety: a simulation is not a bench. Work on a real photon-pair source
(pump lasers are often class 3B or 4) follows the local laser-safety rules.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..channels import choi_from_kraus, choi_from_unitary, compose, partial_trace_output
from ..conventions import builtin_states, density, named_gate
from .plan import analysed_effect, plate_angles, prepared_state

# --------------------------------------------------------------------------
# 1. Distinguishable photons in the postselected controlled-Z
# --------------------------------------------------------------------------

#: Reflectivity of the beam splitters of the postselected controlled-Z.
ETA = 1.0 / 3.0
#: Success probability of the ideal gate, the same for every input: (1 − 2η)² = η² = 1/9.
IDEAL_SUCCESS = 1.0 / 9.0
#: The gates that have a postselected linear-optics implementation here.
POSTSELECTED_GATES = ("CZ", "CNOT")


def cz_paths(eta: float = ETA) -> tuple[np.ndarray, np.ndarray]:
    """The two coincidence paths of the postselected controlled-Z, as 4 × 4 operators.

    The gate of Ralph, Langford, Bell & White, Phys. Rev. A 65, 062324
    (2002) and Hofmann & Takeuchi, Phys. Rev. A 66, 024308 (2002) (built
    with partially polarising beam splitters by Langford et al., Phys. Rev.
    Lett. 95, 210504 (2005) and Kiesel et al., Phys. Rev. Lett. 95, 210505
    (2005); with spatial rails, as a CNOT, by O'Brien et al., Nature 426,
    264 (2003)). Each photon carries its qubit in two rails (modes): |0>
    and |1> (H and V in the polarisation versions). The two |1> rails meet
    at a beam splitter that keeps a photon in its own rail with amplitude
    √η, η = 1/3, and sends it into the other photon's rail with amplitude
    +√(1−η) from one side and −√(1−η) from the other (the opposite signs
    are what unitarity of a real beam splitter requires). Each |0> rail
    passes one more beam splitter that keeps it with amplitude √η and
    discards the rest. The gate succeeds when one photon is detected among
    the control's rails and one among the target's (a coincidence). Two
    sets of paths give a coincidence:

    * **own**: every photon stays in its own rail, amplitude √η·√η = η for
      every input |ij>: ``K_own = η·I``;
    * **exchange**: both photons in their |1> rails and both transmitted,
      so the photons swap rails: amplitude √(1−η)·(−√(1−η)) = −(1−η), for
      |11> only: ``K_ex = −(1−η)·|11><11|``.

    Every other path leaves both photons in one qubit's rails, or loses
    one, and is discarded by the postselection.

    Returns
    -------
    (K_own, K_ex) : two (4, 4) complex arrays, basis |control, target>.
    """
    k_own = eta * np.eye(4, dtype=complex)
    k_ex = np.zeros((4, 4), dtype=complex)
    k_ex[3, 3] = -(1.0 - eta)
    return k_own, k_ex


def distinguishable_cz(x: float, eta: float = ETA) -> np.ndarray:
    """Choi matrix of the postselected controlled-Z with a fraction x of distinguishable pairs.

    **Indistinguishable photons.** The own and exchange paths of
    :func:`cz_paths` end in the same two-photon state, so their amplitudes
    add: K = K_own + K_ex = diag(η, η, η, 2η − 1), which at η = 1/3 is
    CZ/3 — the gate with success probability 1/9 for every input (Ralph et
    al. 2002).

    **Distinguishable photons** (orthogonal in a degree of freedom the
    detectors do not resolve: arrival time, spectrum, spatial mode). After
    the exchange path the photon found in the control's rails is the target
    photon, so the two paths end in orthogonal states of that degree of
    freedom; tracing it out leaves two Kraus operators with no
    interference between them:

        Φ_dist(ρ) = K_own ρ K_own† + K_ex ρ K_ex†.

    Success probabilities Tr Φ_dist(|ij><ij|): η² = 1/9 for |00>, |01>,
    |10>, and η² + (1−η)² = 5/9 for |11> (both photons reflected or both
    transmitted, counted as classical particles: the level without
    two-photon interference of Hong, Ou & Mandel, Phys. Rev. Lett. 59, 2044
    (1987)).

    **Partial distinguishability.** With internal states |a>, |b> of the
    two photons the own path carries |a>_c|b>_t and the exchange path
    |b>_c|a>_t; their overlap is |<a|b>|² (Tr σ_aσ_b for mixed internal
    states; it is the visibility of a Hong–Ou–Mandel dip at a balanced
    beam splitter). With x = 1 − |<a|b>|²,

        Φ_x(ρ) = K_own ρ K_own† + K_ex ρ K_ex† + (1 − x)(K_own ρ K_ex† + K_ex ρ K_own†)
               = (1 − x)·K ρ K† + x·Φ_dist(ρ):

    a fraction 1 − x of the pairs interferes and gets the gate, a fraction
    x does not. The last term of the first line is the interference term; x
    = 1 removes it. In Pauli coordinates (the README's Pauli order, qubit 1
    = control), K_own = II/3 and K_ex = −(II − IZ − ZI + ZZ)/6, so the chi
    matrix lives on {II, IZ, ZI, ZZ} with a = (1/3, 0, 0, 0),
    b = (−1, 1, 1, −1)/6:

        χ = a a† + b b† + (1 − x)(a b† + b a†),

    i.e. χ_II,II = (1 + 4x)/36, χ_II,IZ = χ_II,ZI = (1 − 2x)/36,
    χ_II,ZZ = (2x − 1)/36, and the entries among IZ, ZI, ZZ are ±1/36
    whatever x is.

    **Trace decreasing.** Tr_out J = diag(1, 1, 1, 1 + 4x)/9: the success
    probability depends on the input, so a simulated experiment states it
    as ``trace = "decreasing"`` with the known input rate
    (`gatescope.synth.simulate`).

    Parameters
    ----------
    x : float in [0, 1]
        Fraction of distinguishable pairs.
    eta : float
        Beam-splitter reflectivity (1/3 for the gate; other values give a
        conditional phase other than π and unequal success probabilities).
    """
    if not 0.0 <= x <= 1.0:
        raise ValueError(f"the fraction of distinguishable pairs must lie in [0, 1], got {x}")
    k_own, k_ex = cz_paths(eta)
    coherent = choi_from_kraus([k_own + k_ex])
    incoherent = choi_from_kraus([k_own, k_ex])
    return (1.0 - x) * coherent + x * incoherent


def distinguishability_gate(gate: str, x: float) -> np.ndarray:
    """The postselected gate with a fraction x of distinguishable pairs, CZ or CNOT.

    The CNOT (qubit 1 controls) is the CZ between Hadamards on the target
    (half-wave plates at 22.5° before and after the gate in polarisation):
    Φ^CNOT_x(ρ) = (I⊗H) Φ_x((I⊗H) ρ (I⊗H)) (I⊗H). Its input with the
    larger success probability (1 + 4x)/9 is then control V, target A.
    """
    if gate not in POSTSELECTED_GATES:
        raise ValueError(f"distinguishability is defined for {' and '.join(POSTSELECTED_GATES)}, "
                         f"not for {gate!r}")
    choi = distinguishable_cz(x)
    if gate == "CNOT":
        h_target = choi_from_unitary(np.kron(np.eye(2), named_gate("H")))
        choi = compose(compose(h_target, choi), h_target)
    return choi


def success_probability(choi: np.ndarray, rho: np.ndarray) -> float:
    """Tr Φ(ρ) = Tr[ρ^T · Tr_out J]: the probability that a postselected map succeeds."""
    return float(np.trace(np.asarray(rho).T @ partial_trace_output(choi)).real)


# --------------------------------------------------------------------------
# 2. Wave-plate errors
# --------------------------------------------------------------------------

#: The physical plates of one qubit, in the order of the run sheet's columns.
PLATES = ("prep_hwp", "prep_qwp", "meas_qwp", "meas_hwp")
_NOMINAL_RETARDANCE_DEG = np.array([180.0, 90.0, 90.0, 180.0])


@dataclass(frozen=True)
class PlateErrors:
    """Fixed errors of every physical wave plate of the bench.

    ``angle_deg[q, k]`` is the offset of the fast axis of plate k (in the
    order of `PLATES`) of qubit q (qubit 1 first) from the angle the run
    sheet asks for; ``retardance_deg[q, k]`` its retardance error (the plate
    has retardance 180° + error or 90° + error). A physical plate keeps its
    errors for every setting it is turned to: the offset is a calibration
    error of its mount, the retardance error a manufacturing tolerance or a
    wavelength mismatch. Typical magnitudes are a few tenths of a degree of
    angle and one to a few degrees of retardance (from memory).
    """

    angle_deg: np.ndarray
    retardance_deg: np.ndarray

    def __post_init__(self):
        a = np.array(self.angle_deg, dtype=float)
        r = np.array(self.retardance_deg, dtype=float)
        if a.ndim != 2 or a.shape[1] != len(PLATES) or r.shape != a.shape:
            raise ValueError(f"plate errors must have shape (qubits, {len(PLATES)}), "
                             f"got {a.shape} and {r.shape}")
        a.setflags(write=False)
        r.setflags(write=False)
        object.__setattr__(self, "angle_deg", a)
        object.__setattr__(self, "retardance_deg", r)

    @property
    def n_qubits(self) -> int:
        return self.angle_deg.shape[0]


def draw_plate_errors(n_qubits: int, angle_sd_deg: float, retardance_sd_deg: float,
                      seed: int = 0) -> PlateErrors:
    """Errors of every plate drawn independently: angle ~ N(0, angle_sd²), retardance ~
    N(0, retardance_sd²), in degrees.

    Draws come from ``numpy.random.default_rng(seed)``: the angles of all
    plates (qubit 1 first, plates in `PLATES` order), then the retardances.
    """
    if angle_sd_deg < 0 or retardance_sd_deg < 0:
        raise ValueError("standard deviations of plate errors must not be negative")
    rng = np.random.default_rng(seed)
    shape = (n_qubits, len(PLATES))
    angles = rng.normal(size=shape) * angle_sd_deg
    retard = rng.normal(size=shape) * retardance_sd_deg
    return PlateErrors(angles, retard)


@dataclass(frozen=True)
class ActualOptics:
    """What the optics really do for every single-qubit label, qubit by qubit.

    ``prep[q, s]`` is the density matrix that qubit q's preparation optics
    make when set for ``prep_labels[s]``; ``meas[q, s]`` the effect of its
    analysis optics set for ``meas_labels[s]``. ``prep_angles[s]`` and
    ``meas_angles[s]`` are the nominal (half-wave, quarter-wave) angles in
    degrees of `gatescope.synth.plan.plate_angles`.
    """

    prep_labels: tuple[str, ...]
    meas_labels: tuple[str, ...]
    prep: np.ndarray
    meas: np.ndarray
    prep_angles: tuple[tuple[float, float], ...]
    meas_angles: tuple[tuple[float, float], ...]


def actual_optics(prep_labels, meas_labels, errors: PlateErrors,
                  right_circular: str = "H-iV") -> ActualOptics:
    """The preparation states and analyser effects that plates with these errors make.

    For label s the run sheet sets the plates to the nominal angles of
    `gatescope.synth.plan.plate_angles` (preparation: the source's H light,
    then the half-wave, then the quarter-wave plate; analysis: quarter-wave,
    then half-wave, then a polariser passing H). Plate k of qubit q then sits
    at nominal + ``errors.angle_deg[q, k]`` with retardance nominal +
    ``errors.retardance_deg[q, k]``, and the Jones matrices of the README's
    Conventions give the actual state or effect.
    """
    vectors = builtin_states(right_circular)
    prep_labels = tuple(prep_labels)
    meas_labels = tuple(meas_labels)
    p_angles = tuple(plate_angles(vectors[s], "prep") for s in prep_labels)    # (hwp, qwp)
    m_angles = tuple(plate_angles(vectors[s], "meas") for s in meas_labels)    # (hwp, qwp)
    n = errors.n_qubits
    a = errors.angle_deg
    r = errors.retardance_deg + _NOMINAL_RETARDANCE_DEG
    prep = np.empty((n, len(prep_labels), 2, 2), dtype=complex)
    meas = np.empty((n, len(meas_labels), 2, 2), dtype=complex)
    for q in range(n):
        for s, (h, w) in enumerate(p_angles):
            prep[q, s] = density(prepared_state(h + a[q, 0], w + a[q, 1], r[q, 0], r[q, 1]))
        for s, (h, w) in enumerate(m_angles):
            meas[q, s] = analysed_effect(w + a[q, 2], h + a[q, 3], r[q, 2], r[q, 3])
    return ActualOptics(prep_labels, meas_labels, prep, meas, p_angles, m_angles)


# --------------------------------------------------------------------------
# 3. Accidental coincidences and dark counts
# --------------------------------------------------------------------------

def accidental_rate(singles, window_s: float) -> float:
    """Rate of accidental coincidences (per second) of uncorrelated detectors.

    Two detectors with singles rates S1, S2 (per second) and a coincidence
    window τ (seconds; two events within τ of each other count as a
    coincidence) give 2·τ·S1·S2 (common practice). For k detectors the
    k-fold rate k·τ^(k−1)·Π S_i is used (the same counting, from memory);
    with three or more photons it is tiny, and the accidentals that matter
    there (a true pair plus an uncorrelated photon) are not modelled.
    Detector dark counts enter through the singles rates: a dark count in
    the window of a real photon is an accidental coincidence like any other.
    """
    s = np.asarray(singles, dtype=float).reshape(-1)
    if s.size < 2:
        raise ValueError("accidental coincidences need at least two detectors")
    if np.any(s < 0) or window_s < 0:
        raise ValueError("singles rates and the coincidence window must not be negative")
    k = s.size
    return float(k * window_s ** (k - 1) * np.prod(s))


def detectors_in_coincidence(n_qubits: int) -> int:
    """Detectors in one coincidence: one per photon, and at least two (a one-qubit
    experiment counts coincidences with a herald detector)."""
    return max(int(n_qubits), 2)


def accidental_background(singles, window_s: float, seconds) -> np.ndarray:
    """Expected accidental counts of every row: :func:`accidental_rate` · seconds_k.

    Parameters
    ----------
    singles : sequence of k rates (per second), one per detector in the coincidence
    window_s : coincidence window τ in seconds
    seconds : per-row integration times (array)

    Notes
    -----
    This is the background a lab computes from its mean singles rates (or
    measures in a delayed coincidence channel), which a simulated experiment
    writes as its ``background`` column; gatescope adds the background to
    the model, it never subtracts it. When the source drifts, the true
    accidentals follow it (every singles rate scales with the intensity, so a
    k-fold rate scales as f^k, applied by `gatescope.synth.simulate`) while
    the column keeps the nominal value.
    """
    return accidental_rate(singles, window_s) * np.asarray(seconds, dtype=float)


# --------------------------------------------------------------------------
# 4. Source drift
# --------------------------------------------------------------------------

DRIFT_KINDS = ("linear", "walk")


def drift_factors(n_rows: int, kind: str, size: float, seed=None) -> np.ndarray:
    """Relative source intensity f_k of every row, in acquisition (file) order.

    ``linear``: f_k = 1 + size·(k/(n−1) − 1/2): mean exactly 1, f_last −
    f_first = size (|size| < 2 keeps every factor positive).

    ``walk``: w_0 = 0, w_k = w_{k−1} + (size/√(n−1))·z_k with z_k standard
    normal from ``numpy.random.default_rng(seed)``, so w_last − w_first has
    standard deviation ``size`` whatever the number of rows; f_k =
    exp(w_k) / mean(exp(w)) (mean 1).

    The acquisition order of a simulated experiment is its file order:
    every analyser setting of one preparation, then the next preparation.
    A fit with per-preparation normalisation absorbs the drift between
    preparations; the drift within one preparation's rows is what biases it.
    """
    if n_rows < 1:
        raise ValueError("n_rows must be positive")
    if kind not in DRIFT_KINDS:
        raise ValueError(f"unknown drift kind {kind!r}; known: {', '.join(DRIFT_KINDS)}")
    if n_rows == 1:
        return np.ones(1)
    k = np.arange(n_rows)
    if kind == "linear":
        if not abs(size) < 2:
            raise ValueError(f"a linear drift must change by less than 2 (200 %), got {size}")
        return 1.0 + size * (k / (n_rows - 1) - 0.5)
    if size < 0:
        raise ValueError("the size of a random-walk drift must not be negative")
    rng = np.random.default_rng(seed)
    steps = rng.normal(size=n_rows - 1) * (size / math.sqrt(n_rows - 1))
    w = np.concatenate([[0.0], np.cumsum(steps)])
    f = np.exp(w - w.max())             # no overflow; the normalisation removes the shift
    return f / f.mean()


# --------------------------------------------------------------------------
# SPEC terms
# --------------------------------------------------------------------------

#: The bench kinds of a channel SPEC and their forms (`gatescope.synth.noise`).
LAB_FORMS = {
    "distinguishability": "distinguishability:X",
    "plates": "plates:ANGLE:RETARD[:SEED]",
    "accidentals": "accidentals:SINGLES:WINDOW_NS",
    "drift": "drift:CHANGE",
    "drift-walk": "drift-walk:SIGMA[:SEED]",
}
LAB_KINDS = tuple(LAB_FORMS)
# kind: (required values, optional values; an optional last value is a whole-number SEED)
_ARITY = {"distinguishability": (1, 0), "plates": (2, 1), "accidentals": (2, 0),
          "drift": (1, 0), "drift-walk": (1, 1)}


@dataclass(frozen=True)
class LabNoise:
    """The bench imperfections of a channel SPEC (None when absent).

    Attributes
    ----------
    distinguishability : float or None
        Fraction x of distinguishable photon pairs.
    plates : (angle_sd_deg, retardance_sd_deg, seed) or None
    accidentals : (singles_per_s, window_ns) or None
    drift : ("linear", change, None) or ("walk", sigma, seed or None) or None
    """

    distinguishability: float | None = None
    plates: tuple | None = None
    accidentals: tuple | None = None
    drift: tuple | None = None

    @property
    def trace_decreasing(self) -> bool:
        """The process is the postselected gate (success probability below one)."""
        return self.distinguishability is not None

    def plate_errors(self, n_qubits: int) -> PlateErrors | None:
        """The errors of every plate, drawn from the SPEC's seed; None without ``plates``."""
        if self.plates is None:
            return None
        angle, retard, seed = self.plates
        return draw_plate_errors(n_qubits, angle, retard, seed)


def parse_lab_term(text: str) -> tuple[str, tuple]:
    """Parse one bench term ``KIND:V[:V...]`` of `LAB_KINDS`; returns (kind, values).

    Values are floats, except an optional last SEED (a non-negative whole
    number). Raises ValueError naming the term and what is wrong.
    """
    kind, _, rest = text.partition(":")
    if kind not in LAB_FORMS:
        raise ValueError(f"noise {text!r}: unknown bench kind {kind!r}")
    values = rest.split(":") if rest else []
    required, optional = _ARITY[kind]
    if not required <= len(values) <= required + optional:
        raise ValueError(f"noise {text!r}: expected {LAB_FORMS[kind]}")
    out = []
    for k, v in enumerate(values):
        is_seed = k == required
        try:
            number = int(v) if is_seed else float(v)
        except ValueError:
            what = "a whole number (seed)" if is_seed else "a number"
            raise ValueError(f"noise {text!r}: {v!r} is not {what}") from None
        if not math.isfinite(number):
            raise ValueError(f"noise {text!r}: parameters must be finite")
        if is_seed and number < 0:
            raise ValueError(f"noise {text!r}: a seed must not be negative")
        out.append(number)
    if kind == "distinguishability" and not 0.0 <= out[0] <= 1.0:
        raise ValueError(f"noise {text!r}: the fraction X must lie in [0, 1]")
    if kind in ("plates", "accidentals") and (out[0] < 0 or out[1] < 0):
        raise ValueError(f"noise {text!r}: the values must not be negative")
    if kind == "drift" and not abs(out[0]) < 2:
        raise ValueError(f"noise {text!r}: a linear drift must change by less than 2")
    if kind == "drift-walk" and out[0] < 0:
        raise ValueError(f"noise {text!r}: SIGMA must not be negative")
    return kind, tuple(out)


def lab_noise(terms, spec: str) -> LabNoise:
    """A `LabNoise` from the parsed bench terms of ``spec`` (each kind once; ``drift`` and
    ``drift-walk`` exclude each other)."""
    fields: dict = {}
    for kind, values in terms:
        slot = {"drift-walk": "drift"}.get(kind, kind)
        if slot in fields:
            raise ValueError(f"channel {spec!r}: give one of drift and drift-walk"
                             if slot == "drift" else f"channel {spec!r}: {kind} given twice")
        if kind == "distinguishability":
            fields[slot] = values[0]
        elif kind == "plates":
            fields[slot] = (values[0], values[1], values[2] if len(values) == 3 else 0)
        elif kind == "accidentals":
            fields[slot] = (values[0], values[1])
        elif kind == "drift":
            fields[slot] = ("linear", values[0], None)
        else:
            fields[slot] = ("walk", values[0], values[1] if len(values) == 2 else None)
    return LabNoise(**fields)


__all__ = ["ETA", "IDEAL_SUCCESS", "POSTSELECTED_GATES", "cz_paths", "distinguishable_cz",
           "distinguishability_gate", "success_probability", "PLATES", "PlateErrors",
           "draw_plate_errors", "ActualOptics", "actual_optics", "accidental_rate",
           "accidental_background", "detectors_in_coincidence", "DRIFT_KINDS", "drift_factors",
           "LAB_KINDS", "LAB_FORMS", "LabNoise", "parse_lab_term", "lab_noise"]
