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
Each (sample, residence-time) column is independent, so for one reaction (the closed-form path of
``exomap.core.manifold``) the columns of all samples are stacked into one vectorised pass of the map's own
fold machinery (``exomap.core.opmap.fold_columns``): :class:`StackedManifold` evaluates the manifold with a
different parameter set per column. Per column the feed temperature is split at the refined folds, Hopf points
and the point where the steady temperature equals the maximum temperature into runs on which the number of
states, their stability and whether one is too hot do not change; each cell's region is then a comparison of
its feed temperature with a handful of run ends. Other scenarios (several reactions) are sampled one by one
with the deterministic manifold and the same run logic.

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
from exomap.core.manifold import Manifold, Samples
from exomap.core.regions import CODE
from exomap.core.scenario import R_GAS, Scenario, validate

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
#: Confidence of the one-sided binomial bound.
CONFIDENCE = 0.95

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


def validate_spec(sc: Scenario, spec: UncertaintySpec) -> None:
    """Check a spec against its scenario; raise ``ModelInputError`` naming the target path."""
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
        T_ref = reference_temperature(sc, spec) if kind == "rate_constant" else sc.T_in
        nominal = nominal_value(sc, p.target, T_ref)
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
    validate_spec(sc, spec)
    n = spec.samples
    T_ref = reference_temperature(sc, spec)
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


# -- the stacked manifold (one reaction, closed form) -------------------------------------------------------
class StackedManifold:
    """The closed-form manifold of one reaction (``Manifold.explicit_eval``) for many parameter sets at once.

    Column ``c`` has its own parameters and residence time. The map machinery passes residence times through
    to the manifold without using them, so here the "residence time" arrays it carries are column codes: the
    float index of the column, from which every call gathers that column's parameters. A column code array
    broadcast along its last axis (as ``Samples.tau`` is) is gathered once per row.
    """

    explicit = True
    m = 1

    def __init__(self, samples: ParameterSamples, tau: np.ndarray, sample_index: np.ndarray) -> None:
        sc = samples.base
        i = np.asarray(sample_index, dtype=np.int64)
        tau = np.asarray(tau, dtype=float)
        rhocpV = sc.rho * samples.cp[i] * sc.vessel.V_set
        kappa = samples.UA_jacket[i] / rhocpV
        lam = samples.UA_loss[i] / rhocpV
        p = sc.P_agitator / rhocpV
        self.tau = tau
        self._kappa, self._lam, self._p, self._T_c, self._T_amb = kappa, lam, p, samples.T_c[i], sc.T_amb
        self.lnk0tau = np.log(samples.k0[i, 0] * tau)
        self.E = samples.Ea[i, 0] / R_GAS
        self.J = -samples.dH[i, 0] / (sc.rho * samples.cp[i])
        self.a_col = 1.0 + (kappa + lam) * tau
        self.b_col = (kappa * samples.T_c[i] + lam * sc.T_amb + p) * tau
        nu = sc.nu[:, 0]
        orders = sc.orders[0]
        c_in = samples.c_in[i]
        cons = nu < 0
        with np.errstate(divide="ignore"):
            lim = np.where(cons, c_in / np.where(cons, -nu, 1.0), np.inf)
        self.xi_max = lim.min(axis=1)
        i_lim = np.argmin(lim, axis=1)
        self.ok = (orders[i_lim] > 0) & (self.xi_max > 0)
        self.active = [(c_in[:, k], float(nu[k]), float(orders[k])) for k in range(sc.n_species) if orders[k] != 0]
        # scalars the map machinery reads: whether any column has heat exchange (Hopf points are possible)
        self.kappa = float(np.max(kappa))
        self.lam = float(np.max(lam))

    def temperature_window(self, T_in_lo: float, T_in_hi: float) -> tuple[float, float]:
        """The union over the columns of ``Manifold.temperature_window`` at each column's residence time [K]."""
        inf = np.inf
        lo = np.minimum.reduce(
            [
                np.full(self.tau.shape, T_in_lo),
                np.where(self._kappa > 0, self._T_c, inf),
                np.where(self._lam > 0, self._T_amb, inf),
            ]
        )
        hi = np.maximum.reduce(
            [
                np.full(self.tau.shape, T_in_hi),
                np.where(self._kappa > 0, self._T_c, -inf),
                np.where(self._lam > 0, self._T_amb, -inf),
            ]
        )
        release = self.J * self.xi_max  # one reaction: the limiting reactant runs out
        hi = hi + np.maximum(release, 0.0) + self._p * self.tau
        lo = lo + np.minimum(release, 0.0)
        return float(np.min(np.maximum(lo - 2.0, 50.0))), float(np.max(hi + 5.0))

    def _col(self, code: np.ndarray) -> tuple[np.ndarray, Callable[[np.ndarray], np.ndarray]]:
        code = np.asarray(code)
        if code.ndim >= 1 and code.shape[-1] > 1 and code.strides[-1] == 0:
            rows = code[..., :1].astype(np.int64)
        else:
            rows = code.astype(np.int64)
        return rows, lambda arr: arr[rows]

    def _g(self, take, xi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        logg = np.zeros(np.shape(xi))
        dlogg = np.zeros(np.shape(xi))
        with np.errstate(divide="ignore", invalid="ignore"):
            for c0, nu_i, n_i in self.active:
                C = take(c0) + nu_i * xi
                logg += n_i * np.log(C)
                dlogg += n_i * nu_i / C
        return logg, dlogg

    def explicit_eval(self, tau: np.ndarray, xi: np.ndarray) -> Samples:
        tau, xi = np.broadcast_arrays(np.asarray(tau, float), np.asarray(xi, float))
        _, take = self._col(tau)
        E = take(self.E)
        logg, dlogg = self._g(take, xi)
        with np.errstate(divide="ignore", invalid="ignore"):
            L = take(self.lnk0tau) + logg - np.log(xi)
            valid = (L > 0) & (xi > 0) & (xi < take(self.xi_max))
            T = np.where(valid, E / np.where(valid, L, 1.0), np.nan)
            dT_dxi = T * T / E * (1.0 / xi - dlogg)
        a = take(self.a_col)
        J = take(self.J)
        T_in = a * T - J * xi - take(self.b_col)
        dTin = a * dT_dxi - J
        return Samples(tau, xi, T, xi[..., None], T_in, dTin, dT_dxi, valid, None)

    def trace_det(self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """As ``Manifold.trace_det`` (the 2x2 reduced Jacobian on the manifold), per column."""
        _, take = self._col(tau)
        x = xi[..., 0]
        tau_r = take(self.tau)
        r = x / tau_r
        _, dlogg = self._g(take, x)
        alpha = r * dlogg
        beta = r * take(self.E) / (T * T)
        a = take(self.a_col)
        Jb = take(self.J) * beta
        return alpha + Jb - (1.0 + a) / tau_r, (a - tau_r * (Jb + a * alpha)) / (tau_r * tau_r)

    def state_C(self, e: Samples) -> None:
        """The map machinery asks a manifold for its points' concentrations (``Manifold.state_C``); this one
        works from the extent alone (its ``stability`` takes none)."""
        return None

    def stability(
        self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        tr, det = self.trace_det(tau, T, xi)
        return (tr < 0) & (det > 0), tr, det > 0

    def xi_at_T(self, code: np.ndarray, T: np.ndarray, iterations: int = 60) -> np.ndarray:
        """As ``Manifold.explicit_xi_at_T``, per column (``code`` the column codes)."""
        code, T = np.broadcast_arrays(np.asarray(code, float), np.asarray(T, float))
        _, take = self._col(code)
        ln_tk = take(self.lnk0tau) - take(self.E) / T
        xmax = take(self.xi_max)
        lo = np.log(xmax) - 745.0
        hi = np.log(xmax)
        y = np.minimum(ln_tk + self._g(take, np.zeros(T.shape))[0], hi - 1e-12)
        y = np.maximum(y, lo)
        for _ in range(iterations):
            xi = np.exp(y)
            logg, dlogg = self._g(take, xi)
            f = y - ln_tk - logg
            lo = np.where(f < 0, y, lo)
            hi = np.where(f > 0, y, hi)
            y_new = y - f / (1.0 - xi * dlogg)
            bad = ~((y_new > lo) & (y_new < hi))
            y_new = np.where(bad, 0.5 * (lo + hi), y_new)
            if np.all(np.abs(y_new - y) <= 1e-15 * np.maximum(np.abs(y), 1.0)):
                y = y_new
                break
            y = y_new
        return np.exp(y)

    def sample(self, T_lo: float, T_hi: float, N: int) -> Samples:
        """As ``Manifold.sample`` on the closed-form path: N points per column, even in the log-odds of the
        conversion between the extents at T_lo and T_hi."""
        code = np.arange(self.tau.size, dtype=float)
        s_lo = self.xi_at_T(code, np.full(code.shape, T_lo))
        s_hi = self.xi_at_T(code, np.full(code.shape, T_hi))
        u = np.linspace(0.0, 1.0, N)
        xm = self.xi_max
        w_lo = np.log(s_lo / (xm - s_lo))
        w_hi = np.log(s_hi / (xm - s_hi))
        w = w_lo[:, None] + (w_hi - w_lo)[:, None] * u
        s = xm[:, None] / (1.0 + np.exp(-w))
        return self.explicit_eval(code[:, None], s)

    def s_at_T(self, code: np.ndarray, T: float) -> np.ndarray:
        return self.xi_at_T(code, np.full(np.shape(code), T))


class _SingleManifold:
    """Adapter giving one deterministic ``Manifold`` the interface the run logic uses (codes = column
    indices into ``tau``)."""

    def __init__(self, mf: Manifold, tau: np.ndarray) -> None:
        self.mf = mf
        self.tau = np.asarray(tau, float)
        self.explicit = mf.explicit
        self.m = mf.m
        self.kappa = mf.kappa
        self.lam = mf.lam

    def sample(self, T_lo: float, T_hi: float, N: int) -> Samples:
        return self.mf.sample(self.tau, T_lo, T_hi, N)

    def s_at_T(self, idx: np.ndarray, T: float) -> np.ndarray:
        tau = self.tau[np.asarray(idx, np.int64)]
        if self.mf.explicit:  # the coordinate of the one-reaction path is the log-odds of the conversion
            return self.mf.explicit_w_at_T(tau, np.full(tau.shape, T))
        return np.full(tau.shape, T)


# -- per-column runs and cell regions -----------------------------------------------------------------------
@dataclass(frozen=True)
class ColumnRegions:
    """Regions of every (column, feed temperature) cell, and the folds of every column."""

    region: np.ndarray  # (n_columns, n_tin) int8: runaway / unstable / multiple / stable codes
    ignition: np.ndarray  # (n_columns,) lowest ignition feed temperature [K], NaN where none
    extinction: np.ndarray  # (n_columns,) highest extinction feed temperature [K], NaN where none


def column_regions(mf, T_in: np.ndarray, T_lo: float, T_hi: float, T_max: float, N: int) -> ColumnRegions:  # noqa: ANN001
    """Region codes of every cell of every column of ``mf`` (a :class:`StackedManifold` or a deterministic
    manifold wrapped by ``_SingleManifold``), without solving for each cell's states.

    Along a column the steady states are the points of the curve T_in(s) at the cell's feed temperature. The
    curve is cut at its refined folds, Hopf points and the point at the maximum temperature into runs; on a run
    T_in is monotone and the stability and "too hot" flags are constant, so a cell has one state on each run
    whose T_in span contains it, and its region follows from the counts (DESIGN.md §5; ``sensitive`` is not
    told apart from ``stable`` here).
    """
    from exomap.core import opmap

    deterministic = isinstance(mf, _SingleManifold)
    core_mf = mf.mf if deterministic else mf
    smp = mf.sample(T_lo, T_hi, N)
    n_col = smp.s.shape[0]
    cols = opmap.fold_columns(core_mf, smp)
    smp = cols.smp
    code = np.arange(n_col, dtype=float)
    tau_arg = mf.tau if deterministic else code
    # nodes: both ends, folds, Hopf points, the point at the maximum temperature
    node_col = [np.arange(n_col), np.arange(n_col), cols.fold_col]
    node_s = [smp.s[:, 0], smp.s[:, -1], cols.fold.s]
    node_v = [smp.T_in[:, 0], smp.T_in[:, -1], cols.fold.T_in]
    hc, hs, hv = opmap._hopf(core_mf, tau_arg, cols)
    node_col.append(hc)
    node_s.append(hs)
    node_v.append(hv)
    s_max = mf.s_at_T(code, T_max)
    inside = (s_max > np.minimum(smp.s[:, 0], smp.s[:, -1])) & (s_max < np.maximum(smp.s[:, 0], smp.s[:, -1]))
    ic = np.nonzero(inside)[0]
    if ic.size:
        e = opmap._eval(core_mf, tau_arg[ic], s_max[ic], None)
        node_col.append(ic)
        node_s.append(s_max[ic])
        node_v.append(e.T_in)
    col = np.concatenate(node_col).astype(np.int64)
    s = np.concatenate(node_s)
    v = np.concatenate(node_v)
    order = np.lexsort((s, col))
    col, s, v = col[order], s[order], v[order]
    pair = np.nonzero(col[:-1] == col[1:])[0]
    rc = col[pair]
    s_mid = 0.5 * (s[pair] + s[pair + 1])
    e = opmap._eval(core_mf, tau_arg[rc], s_mid, None)
    stable, _, _ = core_mf.stability(e.tau, e.T, e.xi, core_mf.state_C(e))
    hot = e.T > T_max
    lo = np.minimum(v[pair], v[pair + 1])
    hi = np.maximum(v[pair], v[pair + 1])
    ok = np.isfinite(lo) & np.isfinite(hi) & np.isfinite(e.T)
    rank = np.arange(rc.size) - np.searchsorted(rc, rc)
    R = int(rank.max()) + 1 if rank.size else 1
    LO = np.full((n_col, R), np.inf)
    HI = np.full((n_col, R), -np.inf)
    ST = np.zeros((n_col, R), dtype=bool)
    HT = np.zeros((n_col, R), dtype=bool)
    LO[rc[ok], rank[ok]] = lo[ok]
    HI[rc[ok], rank[ok]] = hi[ok]
    ST[rc[ok], rank[ok]] = stable[ok]
    HT[rc[ok], rank[ok]] = stable[ok] & hot[ok]
    region = np.empty((n_col, T_in.size), dtype=np.int8)
    chunk = max(1, (1 << 21) // max(T_in.size * R, 1))
    vv = T_in[None, :, None]
    for a in range(0, n_col, chunk):
        b = min(a + chunk, n_col)
        present = (LO[a:b, None, :] <= vv) & (vv < HI[a:b, None, :])
        count = present.sum(axis=2)
        n_stable = (present & ST[a:b, None, :]).sum(axis=2)
        runaway = (present & HT[a:b, None, :]).any(axis=2)
        reg = np.full(count.shape, CODE["stable"], dtype=np.int8)
        reg[count > 1] = CODE["multiple"]
        reg[n_stable == 0] = CODE["unstable"]
        reg[runaway] = CODE["runaway"]
        region[a:b] = reg
    ign = np.full(n_col, np.nan)
    ext = np.full(n_col, np.nan)
    rising = cols.rising
    np.fmin.at(ign, cols.fold_col[rising], cols.fold.T_in[rising])
    np.fmax.at(ext, cols.fold_col[~rising], cols.fold.T_in[~rising])
    return ColumnRegions(region, ign, ext)


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
    tau, T_in = opmap._grid_args(sc, tau_range, T_in_range, points, spacing)
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
    explicit = False
    mfs: list[Manifold] = []
    if len(sc.reactions) == 1:
        whole = StackedManifold(ps, np.full(ps.n, tau[-1]), np.arange(ps.n))
        explicit = bool(np.all(whole.ok))
    if explicit:
        # one temperature window for every sample, the union of theirs (Manifold.temperature_window, per sample)
        T_lo, T_hi = whole.temperature_window(float(T_in[0]), float(T_in[-1]))
    else:
        mfs = [Manifold(ps.scenario(i)) for i in range(ps.n)]
        wins = np.array([mf.temperature_window(float(T_in[0]), float(T_in[-1]), float(tau[-1])) for mf in mfs])
        T_lo, T_hi = float(wins[:, 0].min()), float(wins[:, 1].max())
    if explicit and not stacked:
        mfs = [Manifold(ps.scenario(i)) for i in range(ps.n)]
    if stacked and explicit:
        N = STACKED_SAMPLES
        region = np.empty((ps.n * n_tau, n_tin), dtype=np.int8)
        ign = np.empty(ps.n * n_tau)
        ext = np.empty(ps.n * n_tau)
        # chunks of whole samples keep the working arrays moderate and let progress be reported
        per = max(1, min(ps.n, (1 << 12) // n_tau))
        for a in range(0, ps.n, per):
            b = min(a + per, ps.n)
            idx = np.repeat(np.arange(a, b), n_tau)
            smf = StackedManifold(ps, np.tile(tau, b - a), idx)
            cr = column_regions(smf, T_in, T_lo, T_hi, T_max, N)
            region[a * n_tau : b * n_tau] = cr.region
            ign[a * n_tau : b * n_tau] = cr.ignition
            ext[a * n_tau : b * n_tau] = cr.extinction
            if progress:
                progress(b / ps.n)
        method = "stacked columns (closed-form manifold of one reaction)"
    else:
        region = np.empty((ps.n * n_tau, n_tin), dtype=np.int8)
        ign = np.empty(ps.n * n_tau)
        ext = np.empty(ps.n * n_tau)
        for i, mf in enumerate(mfs):
            N = opmap.SAMPLES_EXPLICIT if mf.explicit else opmap.SAMPLES_GENERAL
            cr = column_regions(_SingleManifold(mf, tau), T_in, T_lo, T_hi, T_max, N)
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
