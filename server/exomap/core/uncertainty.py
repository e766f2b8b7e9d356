"""Uncertain kinetic and thermal data: the parameter samples, and the operating map as probabilities.

A scenario may say how well its data are known (DESIGN.md §11): each uncertain parameter has a distribution
about its nominal value, pairs may be correlated, and the rate constant's uncertainty is stated at a
reference temperature :math:`T_{ref}`. The kinetics are written about that temperature,

.. math:: k(T) = k_{ref} \\exp\\left(-\\frac{E_a}{R}\\left(\\frac{1}{T} - \\frac{1}{T_{ref}}\\right)\\right),

so a sample of :math:`E_a` turns the Arrhenius line about the point :math:`(T_{ref}, k_{ref})` that the
calorimeter measured, instead of sliding it: the pre-exponential factor :math:`k_0 = k_{ref} e^{E_a/(R T_{ref})}`
is derived from each sample, never drawn on its own.

Sampling: a scrambled Sobol sequence (``scipy.stats.qmc``, [1]) of ``samples`` points (a power of two, where the
sequence is balanced) in the unit cube is mapped to standard normals, correlated through the Cholesky factor
of the correlation matrix (a Gaussian copula: the correlations are those of the underlying normals), and each
normal is mapped to its parameter's distribution:

* ``normal``: nominal + sd·z;
* ``lognormal``: nominal·factor^z (``factor`` is the geometric standard deviation: one standard deviation
  multiplies or divides the nominal value by it);
* ``uniform``: low + (high − low)·Φ(z).

The same spec and seed give the same samples, bit for bit.

The probability map (:func:`uncertainty_map`) is the operating map of every sample, counted cell by cell.
Each (sample, residence-time) column is independent, so the columns of all samples are stacked into one
vectorised pass of the map's own fold machinery (``exomap.core.opmap.fold_columns``), with the manifold
evaluated by a different parameter set per column (``exomap.core.stacked``): the closed form of one reaction
in the log-odds of its conversion, or the general path (several reactions). Per column the feed temperature is
split at the refined folds, Hopf points and the point where the steady temperature equals the maximum
temperature into runs on which the number of states, their stability and whether one is too hot do not
change; each cell's region is then a comparison of its feed temperature with a handful of run ends. Samples
that do not all feed the same species are taken one by one with the deterministic manifold and the same run
logic (also the reference of the tests and the benchmark, ``stacked=False``).

The bound on each probability is the exact one-sided 95 % binomial (Clopper–Pearson) bound [2]. Sobol points
are not independent draws: their estimates are usually closer to the truth than independent ones, so the
binomial bound is conservative for them rather than exact (checked in the tests by the spread across seeds).

References
----------
[1] I. M. Sobol', "On the distribution of points in a cube and the approximate evaluation of integrals",
    USSR Comput. Math. Math. Phys. 7 (1967) 86-112; A. B. Owen, "Scrambling Sobol' and Niederreiter-Xing
    points", J. Complexity 14 (1998) 466-489.
[2] C. J. Clopper, E. S. Pearson, "The use of confidence or fiducial limits illustrated in the case of the
    binomial", Biometrika 26 (1934) 404-413.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
from scipy import special
from scipy.stats import qmc

from exomap.core.errors import LimitExceededError, ModelInputError
from exomap.core.manifold import Manifold
from exomap.core.regions import CODE
from exomap.core.scenario import R_GAS, Scenario, validate
from exomap.core.stacked import SingleManifold, StackedManifold, column_regions, stacked_class

DISTRIBUTIONS = ("normal", "lognormal", "uniform")
#: Default number of samples and seed (DESIGN.md §11).
DEFAULT_SAMPLES = 256
DEFAULT_SEED = 0
#: Sample counts allowed: powers of two (the Sobol sequence is balanced there) in this range.
MIN_SAMPLES = 8
MAX_SAMPLES = 16384
#: Most sample-cells (samples x cells) one uncertainty map may have.
MAX_SAMPLE_CELLS = 64 * 1024 * 1024
#: A normal distribution on a quantity that must stay positive needs nominal >= this many sd.
POSITIVE_SD_RATIO = 5.0
#: Probabilities of the map, in this order.
PROBABILITY_KEYS = ("runaway", "unstable", "multiple", "unsafe")
#: Quantiles of the boundary bands.
BAND_QUANTILES = (0.05, 0.5, 0.95)
#: Samples of the manifold per stacked column (the deterministic map takes opmap.SAMPLES_EXPLICIT): the folds
#: are refined to machine precision whatever the spacing, and a fold pair closer than one sample is still found
#: (opmap's search inside every dip of |dT_in/ds|), so fewer samples only cost robustness next to a cusp.
STACKED_SAMPLES = 64
#: Samples per stacked column on the general path: as many as the deterministic map takes
#: (opmap.SAMPLES_GENERAL). With 64 a Hopf point next to a fold was missed in one cell of the tests' jacketed
#: A -> P -> D case, for 20 % less time.
STACKED_SAMPLES_GENERAL = 160
#: Columns stacked in one pass on the general path (each has opmap.SAMPLES_GENERAL samples and an isothermal
#: Newton solve per sample: about 30 MB of working arrays for two reactions).
STACKED_GENERAL_COLUMNS = 1024
#: Confidence of the one-sided binomial bound.
CONFIDENCE = 0.95
#: What the bounds are, said in every answer with them (DESIGN.md §11 asks for the exact binomial bound; the
#: samples are not independent draws, so the caveat travels with the numbers).
BOUND_BASIS = (
    "exact one-sided 95 % binomial bound (Clopper-Pearson) on the share of samples; it assumes independent draws, "
    "and the samples are scrambled Sobol points, whose estimates are usually closer to the truth than independent "
    "draws', so for them the bound is on the cautious side"
)

_TARGET_RE = re.compile(
    r"^(?:reactions\[(\d+)\]\.(rate_constant|activation_energy|reaction_enthalpy)"
    r"|jacket\.(ua|coolant_temperature)|heat_loss\.ua|liquid\.heat_capacity|feed\.concentrations\.([^\s.\[\]]+))$"
)
TARGET_PATTERNS = (
    "reactions[i].rate_constant",
    "reactions[i].activation_energy",
    "reactions[i].reaction_enthalpy",
    "jacket.ua",
    "jacket.coolant_temperature",
    "heat_loss.ua",
    "liquid.heat_capacity",
    "feed.concentrations.X",
)


# -- the spec -------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class UncertainParameter:
    """One uncertain parameter, SI.

    Attributes
    ----------
    target : str
        Scenario path (``TARGET_PATTERNS``), e.g. ``"reactions[0].activation_energy"``.
    distribution : str
        ``normal`` | ``lognormal`` | ``uniform``.
    sd : float or None
        Standard deviation of a normal, in the target's SI unit.
    factor : float or None
        Geometric standard deviation of a lognormal [-], > 1 (1 means no spread).
    low, high : float or None
        Bounds of a uniform, in the target's SI unit.
    """

    target: str
    distribution: str
    sd: float | None = None
    factor: float | None = None
    low: float | None = None
    high: float | None = None


@dataclass(frozen=True)
class UncertaintySpec:
    """How well a scenario's data are known (DESIGN.md §11), SI.

    ``T_ref`` is the reference temperature of the rate constants [K] (None: the nominal operating
    temperature, see :func:`reference_temperature`); ``correlations`` are ``(target_a, target_b, rho)``.
    """

    parameters: tuple[UncertainParameter, ...] = ()
    correlations: tuple[tuple[str, str, float], ...] = ()
    T_ref: float | None = None
    samples: int = DEFAULT_SAMPLES
    seed: int = DEFAULT_SEED


def parse_target(sc: Scenario, target: str) -> tuple[str, int | None]:
    """``(kind, index)`` of a target path: kind is one of ``rate_constant``, ``activation_energy``,
    ``reaction_enthalpy`` (index: the reaction), ``jacket.ua``, ``jacket.coolant_temperature``, ``heat_loss.ua``,
    ``liquid.heat_capacity``, ``concentration`` (index: the species). Raises ``ModelInputError`` naming it."""
    m = _TARGET_RE.match(target or "")
    if m is None:
        hint = ""
        if target and target.endswith("pre_exponential"):
            hint = (
                " (the pre-exponential factor is not sampled on its own: state the rate constant's uncertainty at "
                "the reference temperature as reactions[i].rate_constant, and the activation energy's)"
            )
        raise ModelInputError(
            f"unknown target {target!r}{hint}; expected one of {', '.join(TARGET_PATTERNS)}", field="uncertainty"
        )
    if m.group(1) is not None:
        j = int(m.group(1))
        if j >= len(sc.reactions):
            raise ModelInputError(
                f"target {target!r}: there are {len(sc.reactions)} reactions (reactions[0]..reactions"
                f"[{len(sc.reactions) - 1}])",
                field="uncertainty",
            )
        return m.group(2), j
    if m.group(3) is not None:
        if sc.UA_jacket <= 0 and m.group(3) == "ua":
            pass  # a jacket of UA 0 may still be given an uncertain UA
        return f"jacket.{m.group(3)}", None
    if m.group(4) is not None:
        if m.group(4) not in sc.species:
            raise ModelInputError(
                f"target {target!r}: unknown species {m.group(4)!r}; species: {', '.join(sc.species)}",
                field="uncertainty",
            )
        return "concentration", sc.species.index(m.group(4))
    return target, None


def nominal_value(sc: Scenario, target: str, T_ref: float) -> float:
    """The nominal value of a target in SI (a rate constant at ``T_ref`` [K])."""
    kind, idx = parse_target(sc, target)
    if kind == "rate_constant":
        r = sc.reactions[idx]  # type: ignore[index]
        return r.k0 * math.exp(-r.Ea / (R_GAS * T_ref))
    if kind == "activation_energy":
        return sc.reactions[idx].Ea  # type: ignore[index]
    if kind == "reaction_enthalpy":
        return sc.reactions[idx].dH  # type: ignore[index]
    if kind == "concentration":
        return sc.c_in[idx]  # type: ignore[index]
    return {
        "jacket.ua": sc.UA_jacket,
        "jacket.coolant_temperature": sc.T_c,
        "heat_loss.ua": sc.UA_loss,
        "liquid.heat_capacity": sc.cp,
    }[kind]


#: Targets whose values must stay positive (or non-negative) for the model to make sense.
_POSITIVE = {"rate_constant", "activation_energy", "liquid.heat_capacity", "jacket.coolant_temperature"}
_NONNEGATIVE = {"jacket.ua", "heat_loss.ua", "concentration"}


def validate_spec(sc: Scenario, spec: UncertaintySpec, T_ref: float | None = None) -> None:
    """Check a spec against its scenario; raise ``ModelInputError`` naming the target path. ``T_ref``: the
    reference temperature when already known (:func:`reference_temperature` costs a steady-state solve)."""
    if not isinstance(spec.samples, int) or isinstance(spec.samples, bool):
        raise ModelInputError("samples must be a whole number", field="uncertainty.samples")
    n = spec.samples
    if n < MIN_SAMPLES or n > MAX_SAMPLES or n & (n - 1):
        raise ModelInputError(
            f"samples must be a power of two from {MIN_SAMPLES} to {MAX_SAMPLES} (the Sobol sequence is balanced "
            f"at those sizes), e.g. 128, 256 or 1024; got {n}",
            field="uncertainty.samples",
        )
    if not isinstance(spec.seed, int) or isinstance(spec.seed, bool) or spec.seed < 0:
        raise ModelInputError(f"seed must be a whole number >= 0, got {spec.seed!r}", field="uncertainty.seed")
    if spec.T_ref is not None and not (math.isfinite(spec.T_ref) and spec.T_ref > 0):
        raise ModelInputError(
            "reference_temperature must be an absolute temperature in K", field="uncertainty.reference_temperature"
        )
    seen: set[str] = set()
    for i, p in enumerate(spec.parameters):
        kind, _ = parse_target(sc, p.target)
        where = p.target
        field = f"uncertainty.parameters[{i}]"
        if p.target in seen:
            raise ModelInputError(f"target {where!r} is given twice", field=field)
        seen.add(p.target)
        if p.distribution not in DISTRIBUTIONS:
            raise ModelInputError(
                f"{where}: distribution must be one of {', '.join(DISTRIBUTIONS)}, got {p.distribution!r}",
                field=field,
            )
        if kind == "rate_constant" and T_ref is None:
            T_ref = reference_temperature(sc, spec)
        nominal = nominal_value(sc, p.target, T_ref if kind == "rate_constant" else sc.T_in)  # type: ignore[arg-type]
        if p.distribution == "normal":
            if p.sd is None or not (math.isfinite(p.sd) and p.sd >= 0):
                raise ModelInputError(f"{where}: a normal distribution needs sd >= 0", field=field)
            if kind in _POSITIVE | _NONNEGATIVE and p.sd > 0 and nominal < POSITIVE_SD_RATIO * p.sd:
                raise ModelInputError(
                    f"{where}: a normal with sd {p.sd:g} about {nominal:g} reaches non-physical values (sd must be "
                    f"at most 1/{POSITIVE_SD_RATIO:g} of the nominal value); use a lognormal with a factor",
                    field=field,
                )
        elif p.distribution == "lognormal":
            if p.factor is None or not (math.isfinite(p.factor) and p.factor >= 1):
                raise ModelInputError(
                    f"{where}: a lognormal needs factor >= 1 (the geometric standard deviation)", field="uncertainty"
                )
            if kind in ("reaction_enthalpy",) and nominal == 0:
                raise ModelInputError(
                    f"{where}: a lognormal about a nominal value of 0 has no spread", field="uncertainty"
                )
        else:
            if p.low is None or p.high is None or not (math.isfinite(p.low) and math.isfinite(p.high)):
                raise ModelInputError(f"{where}: a uniform distribution needs low and high", field=field)
            if not p.low < p.high:
                raise ModelInputError(f"{where}: expected low < high, got {p.low:g}, {p.high:g}", field=field)
            if (kind in _POSITIVE and p.low <= 0) or (kind in _NONNEGATIVE and p.low < 0):
                raise ModelInputError(f"{where}: low must be positive, got {p.low:g}", field=field)
    _correlation_matrix(spec)


def _correlation_matrix(spec: UncertaintySpec) -> np.ndarray:
    names = [p.target for p in spec.parameters]
    d = len(names)
    rho = np.eye(d)
    for a, b, r in spec.correlations:
        for t in (a, b):
            if t not in names:
                raise ModelInputError(
                    f"correlation names {t!r}, which is not one of the uncertain parameters ({', '.join(names)})",
                    field="uncertainty.correlations",
                )
        if a == b:
            raise ModelInputError(f"correlation of {a!r} with itself", field="uncertainty.correlations")
        if not (math.isfinite(r) and -1 < r < 1):
            raise ModelInputError(
                f"correlation of {a!r} and {b!r} must lie strictly between -1 and 1, got {r!r}",
                field="uncertainty.correlations",
            )
        i, j = names.index(a), names.index(b)
        rho[i, j] = rho[j, i] = r
    if d and np.min(np.linalg.eigvalsh(rho)) <= 1e-10:
        raise ModelInputError(
            "the correlations do not form a valid correlation matrix (not positive definite)",
            field="uncertainty.correlations",
        )
    return rho


# -- the samples ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ParameterSamples:
    """The samples of one spec.

    ``z`` (n, d) are the correlated standard normals, ``values`` (n, d) the parameter values in SI (rate
    constants at ``T_ref``), ``scenarios`` the scenario of each sample (built on demand by :meth:`scenario`).
    """

    base: Scenario
    spec: UncertaintySpec
    T_ref: float
    targets: tuple[str, ...]
    z: np.ndarray
    values: np.ndarray
    k0: np.ndarray  # (n, m)
    Ea: np.ndarray  # (n, m)
    dH: np.ndarray  # (n, m)
    cp: np.ndarray  # (n,)
    UA_jacket: np.ndarray
    T_c: np.ndarray
    UA_loss: np.ndarray
    c_in: np.ndarray  # (n, n_species)

    @property
    def n(self) -> int:
        return int(self.z.shape[0])

    def scenario(self, i: int) -> Scenario:
        """The scenario of sample ``i`` (the base with the sampled values)."""
        b = self.base
        reactions = tuple(
            replace(r, k0=float(self.k0[i, j]), Ea=float(self.Ea[i, j]), dH=float(self.dH[i, j]))
            for j, r in enumerate(b.reactions)
        )
        return replace(
            b,
            reactions=reactions,
            cp=float(self.cp[i]),
            UA_jacket=float(self.UA_jacket[i]),
            T_c=float(self.T_c[i]),
            UA_loss=float(self.UA_loss[i]),
            c_in=tuple(float(v) for v in self.c_in[i]),
        )


def reference_temperature(sc: Scenario, spec: UncertaintySpec) -> float:
    """The reference temperature of the rate constants [K]: the spec's, else the nominal operating temperature
    (the low stable steady state at the scenario's own feed; the feed temperature if there is none)."""
    if spec.T_ref is not None:
        return float(spec.T_ref)
    from exomap.core.steady import steady_states

    try:
        states = steady_states(sc, sc.tau_nominal, sc.T_in).states
    except (ModelInputError, RuntimeError):
        return float(sc.T_in)
    stable = [s for s in states if s.stability == "stable"]
    pick = stable or list(states)
    return float(pick[0].T) if pick else float(sc.T_in)


def draw(
    sc: Scenario, spec: UncertaintySpec, *, samples: int | None = None, seed: int | None = None
) -> ParameterSamples:
    """The parameter samples of a spec (scrambled Sobol, Gaussian copula); ``samples``/``seed`` override the
    spec's. Raises ``ModelInputError`` naming the offending target."""
    if samples is not None or seed is not None:
        spec = replace(
            spec, samples=spec.samples if samples is None else samples, seed=spec.seed if seed is None else seed
        )
    validate(sc)
    T_ref = reference_temperature(sc, spec)
    validate_spec(sc, spec, T_ref)
    n = spec.samples
    d = len(spec.parameters)
    if d:
        u = qmc.Sobol(d, scramble=True, seed=spec.seed).random_base2(int(round(math.log2(n))))
        u = np.clip(u, 0.5 / (1 << 30), 1.0 - 0.5 / (1 << 30))  # a scrambled point may sit exactly on 0
        L = np.linalg.cholesky(_correlation_matrix(spec))
        z = special.ndtri(u) @ L.T
    else:
        z = np.zeros((n, 0))
    m = len(sc.reactions)
    k_ref = np.array([r.k0 * math.exp(-r.Ea / (R_GAS * T_ref)) for r in sc.reactions])
    kr = np.tile(k_ref, (n, 1))
    Ea = np.tile(sc.Ea, (n, 1))
    dH = np.tile(sc.dH, (n, 1))
    cols = {
        "liquid.heat_capacity": np.full(n, sc.cp),
        "jacket.ua": np.full(n, sc.UA_jacket),
        "jacket.coolant_temperature": np.full(n, sc.T_c),
        "heat_loss.ua": np.full(n, sc.UA_loss),
    }
    c_in = np.tile(np.asarray(sc.c_in, float), (n, 1))
    values = np.empty((n, d))
    for k, p in enumerate(spec.parameters):
        nominal = nominal_value(sc, p.target, T_ref)
        zk = z[:, k]
        if p.distribution == "normal":
            v = nominal + float(p.sd) * zk  # type: ignore[arg-type]
        elif p.distribution == "lognormal":
            v = nominal * float(p.factor) ** zk  # type: ignore[operator]
        else:
            v = float(p.low) + (float(p.high) - float(p.low)) * special.ndtr(zk)  # type: ignore[arg-type]
        values[:, k] = v
        kind, idx = parse_target(sc, p.target)
        if kind == "rate_constant":
            kr[:, idx] = v
        elif kind == "activation_energy":
            Ea[:, idx] = v
        elif kind == "reaction_enthalpy":
            dH[:, idx] = v
        elif kind == "concentration":
            c_in[:, idx] = v
        else:
            cols[kind][:] = v
    k0 = kr * np.exp(Ea / (R_GAS * T_ref))
    if m and not np.all(np.isfinite(k0) & (k0 > 0)):
        raise ModelInputError(
            "a sampled pre-exponential factor overflows: the reference temperature is too far from the data",
            field="uncertainty.reference_temperature",
        )
    return ParameterSamples(
        sc,
        spec,
        T_ref,
        tuple(p.target for p in spec.parameters),
        z,
        values,
        k0,
        Ea,
        dH,
        cols["liquid.heat_capacity"],
        cols["jacket.ua"],
        cols["jacket.coolant_temperature"],
        cols["heat_loss.ua"],
        c_in,
    )


# -- statistics -----------------------------------------------------------------------------------------------
def upper_bound(k: np.ndarray | int, n: int, confidence: float = CONFIDENCE) -> np.ndarray:
    """Exact one-sided upper confidence bound on a binomial proportion (Clopper–Pearson [2]).

    .. math:: p_U = B^{-1}(c;\\, k + 1,\\, n - k) \\text{ for } k < n, \\quad p_U = 1 \\text{ for } k = n

    with :math:`B^{-1}` the inverse regularised incomplete beta function.

    Parameters
    ----------
    k : int or array of int
        Successes [-].
    n : int
        Trials [-].
    confidence : float
        One-sided confidence level [-].

    Returns
    -------
    ndarray
        The bound [-], same shape as ``k``.

    Examples
    --------
    >>> round(float(upper_bound(0, 256)), 5)  # 1 - 0.05**(1/256)
    0.01163
    """
    k = np.asarray(k, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        b = special.betaincinv(k + 1.0, np.maximum(n - k, 1e-300), confidence)
    return np.where(k >= n, 1.0, b)


# -- the uncertainty map --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class UncertaintyMapResult:
    """Probability map. Grids are indexed [feed temperature][residence time].

    ``counts`` holds, per key of ``PROBABILITY_KEYS``, how many samples put the cell in that region;
    ``probability`` = counts / samples; ``upper`` the one-sided 95 % bound on each.
    """

    tau: np.ndarray
    T_in: np.ndarray
    spacing: str
    samples: int
    seed: int
    T_ref: float
    targets: tuple[str, ...]
    counts: dict
    probability: dict
    upper: dict
    max_unsafe_probability: float
    robust: np.ndarray
    bands: dict
    drivers: tuple[dict, ...]
    nominal: object  # the nominal MapResult (its boundaries are drawn over the probabilities)
    method: str
    success: bool
    message: str

    def to_dict(self) -> dict:
        """The nominal map's answer (DESIGN.md §4: regions, boundaries, ...) with the probability keys of
        DESIGN.md §11 added, so a client of the map reads either."""

        def grid(a: np.ndarray) -> list:
            return np.round(np.asarray(a, float), 6).tolist()

        def rows(arr: np.ndarray) -> list:
            arr = np.asarray(arr, dtype=float)
            return np.where(np.isfinite(arr), arr, np.array(None, dtype=object)).tolist()

        d = self.nominal.to_dict()  # type: ignore[attr-defined]
        d.update(
            {
                "samples": self.samples,
                "seed": self.seed,
                "reference_temperature_K": self.T_ref,
                "parameters": list(self.targets),
                "probability": {k: grid(self.probability[k]) for k in PROBABILITY_KEYS},
                "upper_bound_95": {k: grid(self.upper[k]) for k in PROBABILITY_KEYS},
                "upper_bound_basis": BOUND_BASIS,
                "max_unsafe_probability": self.max_unsafe_probability,
                "robust_window": self.robust.tolist(),
                "boundary_bands": {
                    kind: {
                        "fraction": np.round(self.bands[kind]["fraction"], 6).tolist(),
                        **{f"q{round(100 * q):02d}": rows(self.bands[kind][q]) for q in BAND_QUANTILES},
                    }
                    for kind in ("ignition", "extinction")
                },
                "drivers": list(self.drivers),
                "method": self.method,
                "success": self.success and bool(d["success"]),
                "message": f"{self.message}; nominal map: {d['message']}",
            }
        )
        return d

    def to_csv(self) -> str:
        """One row per cell: the probabilities, their bounds, whether the cell is in the robust window."""
        import csv
        import io

        out = io.StringIO()
        w = csv.writer(out, lineterminator="\n")
        w.writerow(
            ["residence_time_s", "feed_temperature_K"]
            + [f"probability_{k}" for k in PROBABILITY_KEYS]
            + [f"upper_bound_95_{k}" for k in PROBABILITY_KEYS]
            + ["robust"]
        )
        for i, T_in in enumerate(self.T_in):
            for j, tau in enumerate(self.tau):
                w.writerow(
                    [f"{tau:.6g}", f"{T_in:.6g}"]
                    + [f"{self.probability[k][i, j]:.6g}" for k in PROBABILITY_KEYS]
                    + [f"{self.upper[k][i, j]:.6g}" for k in PROBABILITY_KEYS]
                    + [int(bool(self.robust[i, j]))]
                )
        return out.getvalue()


def _drivers(ps: ParameterSamples, n_tau: int, ign: np.ndarray, ext: np.ndarray, unsafe_share: np.ndarray) -> list:
    """How much each parameter moves the boundaries: per residence time, the least-squares slope of the
    ignition (extinction) feed temperature on the parameters' standard normals over the samples that have
    the fold, in K per standard deviation, then the root mean square over residence times; and the slope of
    the map's unsafe share per standard deviation."""
    d = ps.z.shape[1]
    if d == 0:
        return []
    Z = ps.z - ps.z.mean(axis=0)

    def slopes(y: np.ndarray) -> np.ndarray:  # y (n_samples, n_tau)
        acc = np.zeros(d)
        used = 0
        for j in range(y.shape[1]):
            ok = np.isfinite(y[:, j])
            if ok.sum() < max(d + 2, 8):
                continue
            A = np.column_stack((np.ones(ok.sum()), ps.z[ok]))
            coef = np.linalg.lstsq(A, y[ok, j], rcond=None)[0][1:]
            acc += coef**2
            used += 1
        return np.sqrt(acc / used) if used else np.full(d, np.nan)

    s_ign = slopes(ign.reshape(ps.n, n_tau))
    s_ext = slopes(ext.reshape(ps.n, n_tau))
    A = np.column_stack((np.ones(ps.n), Z))
    s_uns = np.linalg.lstsq(A, unsafe_share, rcond=None)[0][1:]
    out = []
    for k, t in enumerate(ps.targets):
        eff = np.nanmax([s_ign[k], s_ext[k]]) if np.isfinite([s_ign[k], s_ext[k]]).any() else float("nan")
        out.append(
            {
                "target": t,
                "ignition_K_per_sd": None if not np.isfinite(s_ign[k]) else round(float(s_ign[k]), 4),
                "extinction_K_per_sd": None if not np.isfinite(s_ext[k]) else round(float(s_ext[k]), 4),
                "boundary_shift_K_per_sd": None if not np.isfinite(eff) else round(float(eff), 4),
                "unsafe_share_per_sd": round(float(s_uns[k]), 6),
            }
        )
    out.sort(key=lambda r: (-(r["boundary_shift_K_per_sd"] or 0.0), -abs(r["unsafe_share_per_sd"])))
    return out


def uncertainty_map(
    sc: Scenario,
    spec: UncertaintySpec | None = None,
    *,
    tau_range: tuple[float, float] | None = None,
    T_in_range: tuple[float, float] | None = None,
    points: tuple[int, int] | None = None,
    spacing: str = "log",
    samples: int | None = None,
    seed: int | None = None,
    stacked: bool = True,
    progress: Callable[[float], None] | None = None,
) -> UncertaintyMapResult:
    """The operating map under uncertain data: per cell the probability of each unsafe region.

    Parameters
    ----------
    sc : Scenario
    spec : UncertaintySpec, optional
        Default: the scenario's own ``sc.uncertainty``.
    tau_range, T_in_range, points, spacing
        The map window and grid, as for ``exomap.core.opmap.operating_map`` ([s], [K], [-]).
    samples, seed : int, optional
        Override the spec's sample count (a power of two) and seed.
    stacked : bool
        Stack the columns of all samples into one pass (one reaction); False samples one by one (the
        reference the tests and benchmark compare with).
    progress : callable, optional
        Called with the share done [-] as the work proceeds.

    Returns
    -------
    UncertaintyMapResult

    Raises
    ------
    ModelInputError
        No uncertainty block, a bad target (``field`` names the path), a bad window.
    LimitExceededError
        More sample-cells than ``MAX_SAMPLE_CELLS``.
    """
    from exomap.core import opmap

    spec = spec if spec is not None else getattr(sc, "uncertainty", None)
    if spec is None:
        raise ModelInputError(
            "the scenario has no uncertainty block: add one with the uncertain parameters (DESIGN.md §11)",
            field="uncertainty",
        )
    n_req = spec.samples if samples is None else samples
    tau, T_in = opmap.grid_axes(sc, tau_range, T_in_range, points, spacing)
    if n_req * tau.size * T_in.size > MAX_SAMPLE_CELLS:
        raise LimitExceededError(
            f"{n_req} samples x {tau.size} x {T_in.size} cells is more than the limit of {MAX_SAMPLE_CELLS} "
            "sample-cells",
            field="samples",
        )
    ps = draw(sc, spec, samples=samples, seed=seed)
    nominal = opmap.operating_map(
        sc,
        tau_range=(tau[0], tau[-1]),
        T_in_range=(T_in[0], T_in[-1]),
        points=(tau.size, T_in.size),
        spacing=spacing,
    )
    T_max = sc.limits.T_max
    n_tau, n_tin = tau.size, T_in.size
    lo_in, hi_in = float(T_in[0]), float(T_in[-1])
    # how the samples are taken: stacked with the closed form of one reaction, stacked on the general path
    # (several reactions), or one deterministic manifold per sample (the reference; also where the samples
    # cannot be stacked)
    kind = stacked_class(ps)
    if kind is None or not stacked:
        mfs = [Manifold(ps.scenario(i)) for i in range(ps.n)]
    if kind is not None:
        # one temperature window for every sample, the union of theirs (Manifold.temperature_window, per sample)
        T_lo, T_hi = kind(ps, np.full(ps.n, tau[-1]), np.arange(ps.n)).window(lo_in, hi_in)
    else:
        wins = np.array([mf.temperature_window(lo_in, hi_in, float(tau[-1])) for mf in mfs])
        T_lo, T_hi = float(wins[:, 0].min()), float(wins[:, 1].max())
    region = np.empty((ps.n * n_tau, n_tin), dtype=np.int8)
    ign = np.empty(ps.n * n_tau)
    ext = np.empty(ps.n * n_tau)
    if stacked and kind is not None:
        if kind is StackedManifold:
            N, budget = STACKED_SAMPLES, 1 << 12
            method = "stacked columns (closed-form manifold of one reaction)"
        else:
            N, budget = STACKED_SAMPLES_GENERAL, STACKED_GENERAL_COLUMNS
            method = "stacked columns (general path)"
        # chunks of whole samples keep the working arrays moderate and let progress be reported
        per = max(1, min(ps.n, budget // n_tau))
        for a in range(0, ps.n, per):
            b = min(a + per, ps.n)
            idx = np.repeat(np.arange(a, b), n_tau)
            cr = column_regions(kind(ps, np.tile(tau, b - a), idx), T_in, T_lo, T_hi, T_max, N)
            region[a * n_tau : b * n_tau] = cr.region
            ign[a * n_tau : b * n_tau] = cr.ignition
            ext[a * n_tau : b * n_tau] = cr.extinction
            if progress:
                progress(b / ps.n)
    else:
        for i, mf in enumerate(mfs):
            N = opmap.SAMPLES_EXPLICIT if mf.explicit else opmap.SAMPLES_GENERAL
            cr = column_regions(SingleManifold(mf, tau), T_in, T_lo, T_hi, T_max, N)
            region[i * n_tau : (i + 1) * n_tau] = cr.region
            ign[i * n_tau : (i + 1) * n_tau] = cr.ignition
            ext[i * n_tau : (i + 1) * n_tau] = cr.extinction
            if progress:
                progress((i + 1) / ps.n)
        method = "one sample at a time"
    region = region.reshape(ps.n, n_tau, n_tin).transpose(0, 2, 1)  # (sample, T_in, tau)
    ind = {
        "runaway": region == CODE["runaway"],
        "unstable": region == CODE["unstable"],
        "multiple": region == CODE["multiple"],
    }
    ind["unsafe"] = ind["runaway"] | ind["unstable"]
    counts = {k: ind[k].sum(axis=0) for k in PROBABILITY_KEYS}
    prob = {k: counts[k] / ps.n for k in PROBABILITY_KEYS}
    upper = {k: upper_bound(counts[k], ps.n) for k in PROBABILITY_KEYS}
    limit = sc.policy.max_unsafe_probability
    robust = upper["unsafe"] < limit
    bands = {}
    for kind, arr in (("ignition", ign), ("extinction", ext)):
        y = arr.reshape(ps.n, n_tau)
        frac = np.isfinite(y).mean(axis=0)
        entry: dict = {"fraction": frac}
        for q in BAND_QUANTILES:
            with np.errstate(all="ignore"):
                qv = np.full(n_tau, np.nan)
                has = np.isfinite(y).any(axis=0)
                if has.any():
                    qv[has] = np.nanquantile(y[:, has], q, axis=0)
            qv = np.where((qv >= T_in[0]) & (qv <= T_in[-1]), qv, np.nan)
            entry[q] = np.column_stack((tau, qv))
        bands[kind] = entry
    unsafe_share = ind["unsafe"].reshape(ps.n, -1).mean(axis=1)
    drivers = _drivers(ps, n_tau, ign, ext, unsafe_share)
    n_robust = int(robust.sum())
    msg = (
        f"{ps.n} samples (seed {ps.spec.seed}) x {n_tau} x {n_tin} cells; {n_robust} cells in the robust window "
        f"(95 % bound on the unsafe probability below {limit:g})"
    )
    if upper_bound(0, ps.n) >= limit:
        msg += f"; no cell can qualify with {ps.n} samples: even none unsafe bounds the probability at " + (
            f"{float(upper_bound(0, ps.n)):.3g}, use more samples"
        )
    return UncertaintyMapResult(
        tau,
        T_in,
        spacing,
        ps.n,
        ps.spec.seed,
        ps.T_ref,
        ps.targets,
        counts,
        prob,
        upper,
        limit,
        robust,
        bands,
        tuple(drivers),
        nominal,
        method,
        True,
        msg,
    )


__all__ = [
    "ParameterSamples",
    "StackedManifold",
    "UncertainParameter",
    "UncertaintyMapResult",
    "UncertaintySpec",
    "column_regions",
    "draw",
    "parse_target",
    "reference_temperature",
    "uncertainty_map",
    "upper_bound",
    "validate_spec",
]
