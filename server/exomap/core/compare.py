"""Compare two operating maps (two scenarios, or one scenario at two conditions) on one shared grid.

A change review asks what a change does to the safe window: which cells of the residence-time x
feed-temperature plane change region, from what to what, and whether each became worse or better. Region
codes of ``exomap.core.regions`` are ordered by severity (``stable`` 0 < ``sensitive`` 1 < ``multiple`` 2 <
``unstable`` 3 < ``runaway`` 4), so a cell *became worse* when its code rose and *became better* when it fell.

Both maps are computed by ``exomap.core.opmap.operating_map`` on exactly the same grid (the same
``tau_range``, ``T_in_range``, ``points`` and ``spacing``), so the comparison is cell by cell, with no
interpolation. The default window is the envelope of the two scenarios' own map windows, so neither side's
window is cut off. Each side keeps its own boundaries (ignition, extinction, Hopf, maximum temperature,
cusps), solved exactly by the map.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from exomap.core.opmap import MapResult, operating_map
from exomap.core.regions import REGIONS
from exomap.core.scenario import Scenario

_KEY = {code: key for code, key, _ in REGIONS}


def default_window(sc: Scenario) -> tuple[tuple[float, float], tuple[float, float], tuple[int, int]]:
    """A scenario's own map window: (residence time [s], feed temperature [K], points), as ``operating_map``
    takes it when no window is given."""
    spec = sc.map
    if spec is not None:
        return tuple(spec.tau_range), tuple(spec.T_in_range), tuple(spec.points)  # type: ignore[return-value]
    return (sc.tau_nominal / 10.0, sc.tau_nominal * 10.0), (sc.T_in - 40.0, sc.T_in + 40.0), (200, 200)


def shared_window(sc_a: Scenario, sc_b: Scenario) -> tuple[tuple[float, float], tuple[float, float], tuple[int, int]]:
    """The envelope of both scenarios' map windows, on the finer of their two grids."""
    ta, Ta, pa = default_window(sc_a)
    tb, Tb, pb = default_window(sc_b)
    tau = (min(ta[0], tb[0]), max(ta[1], tb[1]))
    T_in = (min(Ta[0], Tb[0]), max(Ta[1], Tb[1]))
    points = (max(pa[0], pb[0]), max(pa[1], pb[1]))
    return tau, T_in, points


@dataclass(frozen=True)
class MapComparison:
    """Two operating maps on one grid and the cells whose region changed. Grids are [feed temperature][residence
    time], like ``MapResult``.

    Attributes
    ----------
    a, b : MapResult
        The two maps (same axes).
    changed : ndarray of bool
        True where the region differs.
    direction : ndarray of int
        +1 where B's region is more severe than A's (became worse), -1 where less (became better), 0 same.
    transitions : tuple of (str, str, int)
        (from key, to key, number of cells) for every region pair that occurs, most cells first.
    """

    a: MapResult
    b: MapResult
    changed: np.ndarray
    direction: np.ndarray
    transitions: tuple[tuple[str, str, int], ...]
    success: bool
    message: str

    @property
    def changed_count(self) -> int:
        return int(self.changed.sum())

    def to_dict(self) -> dict:
        da, db = self.a.to_dict(), self.b.to_dict()
        return {
            "residence_time_s": da["residence_time_s"],
            "feed_temperature_K": da["feed_temperature_K"],
            "spacing": da["spacing"],
            "legend": da["legend"],
            "region_a": da["region"],
            "region_b": db["region"],
            "state_count_a": da["state_count"],
            "state_count_b": db["state_count"],
            "changed": self.changed.tolist(),
            "direction": self.direction.tolist(),
            "changed_count": self.changed_count,
            "worse_count": int((self.direction > 0).sum()),
            "better_count": int((self.direction < 0).sum()),
            "cells": int(self.changed.size),
            "transitions": [{"from": f, "to": t, "cells": n} for f, t, n in self.transitions],
            "limit_temperature_a_K": da["limit_temperature_K"],
            "limit_temperature_b_K": db["limit_temperature_K"],
            "valve_limited_a": da["valve_limited"],
            "valve_limited_b": db["valve_limited"],
            "boundaries_a": da["boundaries"],
            "boundaries_b": db["boundaries"],
            "success": self.success,
            "message": self.message,
        }


def region_changes(region_a: np.ndarray, region_b: np.ndarray) -> tuple[np.ndarray, np.ndarray, tuple]:
    """Changed cells, their direction (+1 worse, -1 better) and the counted transitions of two region grids.

    Examples
    --------
    >>> changed, direction, transitions = region_changes(np.array([[0, 2]]), np.array([[0, 4]]))
    >>> changed.tolist(), direction.tolist(), transitions
    ([[False, True]], [[0, 1]], (('multiple', 'runaway', 1),))
    """
    ra = np.asarray(region_a, dtype=np.int64)
    rb = np.asarray(region_b, dtype=np.int64)
    if ra.shape != rb.shape:
        raise ValueError(f"region grids differ in shape: {ra.shape} and {rb.shape}")
    changed = ra != rb
    direction = np.sign(rb - ra).astype(np.int8)
    n = len(REGIONS)
    pair = np.bincount((ra[changed] * n + rb[changed]).ravel(), minlength=n * n).reshape(n, n)
    found = [(_KEY[i], _KEY[j], int(pair[i, j])) for i in range(n) for j in range(n) if pair[i, j] > 0]
    found.sort(key=lambda t: (-t[2], t[0], t[1]))
    return changed, direction, tuple(found)


def compare_maps(
    sc_a: Scenario,
    sc_b: Scenario,
    *,
    tau_range: tuple[float, float] | None = None,
    T_in_range: tuple[float, float] | None = None,
    points: tuple[int, int] | None = None,
    spacing: str = "log",
    T_c_a: float | None = None,
    T_c_b: float | None = None,
) -> MapComparison:
    """The operating maps of two scenarios on one shared grid, and the cells whose region changed.

    Parameters
    ----------
    sc_a, sc_b : Scenario
        Before (A) and after (B) the change. The same scenario twice with different coolant temperatures
        compares two conditions of one tank.
    tau_range : (float, float), optional
        Residence-time window [s]; default the envelope of both scenarios' windows (``shared_window``).
    T_in_range : (float, float), optional
        Feed-temperature window [K]; default the envelope.
    points : (int, int), optional
        (n_tau, n_tin) [-]; default the finer of the two scenarios' grids.
    spacing : str
        ``"log"`` or ``"linear"`` residence-time axis.
    T_c_a, T_c_b : float, optional
        Coolant temperature [K] overriding each scenario's.

    Returns
    -------
    MapComparison

    Raises
    ------
    ModelInputError, LimitExceededError
        As ``operating_map``.
    """
    tau_d, tin_d, pts_d = shared_window(sc_a, sc_b)
    kw = {
        "tau_range": tau_range or tau_d,
        "T_in_range": T_in_range or tin_d,
        "points": points or pts_d,
        "spacing": spacing,
    }
    ma = operating_map(sc_a, T_c=T_c_a, **kw)
    mb = operating_map(sc_b, T_c=T_c_b, **kw)
    changed, direction, transitions = region_changes(ma.region, mb.region)
    success = bool(ma.success and mb.success)
    n = int(changed.sum())
    message = f"{n} of {changed.size} cells changed region"
    if not success:
        message += "; " + "; ".join(m.message for m in (ma, mb) if not m.success)
    return MapComparison(ma, mb, changed, direction, transitions, success, message)


@dataclass(frozen=True)
class Setpoint:
    """One side's operating point: residence time [s], feed temperature [K], assumed branch."""

    tau: float
    T_in: float
    branch: str | None = None

    def to_dict(self, sc: Scenario) -> dict:
        return {
            "residence_time_s": self.tau,
            "feed_temperature_K": self.T_in,
            "flow_m3_per_s": sc.vessel.V_set / self.tau,
            "branch": self.branch,
        }


@dataclass(frozen=True)
class Comparison:
    """Before (A) and after (B): the map comparison and both setpoint checks."""

    sc_a: Scenario
    sc_b: Scenario
    setpoint_a: Setpoint
    setpoint_b: Setpoint
    map: MapComparison
    check_a: object | None
    check_b: object | None
    success: bool
    message: str

    def to_dict(self) -> dict:
        from exomap.core.cautions import CAUTIONS

        checks = None
        if self.check_a is not None and self.check_b is not None:
            checks = {"a": self.check_a.to_dict(), "b": self.check_b.to_dict()}  # type: ignore[attr-defined]
        return {
            "setpoint_a": self.setpoint_a.to_dict(self.sc_a),
            "setpoint_b": self.setpoint_b.to_dict(self.sc_b),
            "map": self.map.to_dict(),
            "checks": checks,
            "cautions": list(CAUTIONS),
            "success": self.success,
            "message": self.message,
        }


def compare(
    sc_a: Scenario,
    sc_b: Scenario,
    *,
    setpoint_a: Setpoint | None = None,
    setpoint_b: Setpoint | None = None,
    tau_range: tuple[float, float] | None = None,
    T_in_range: tuple[float, float] | None = None,
    points: tuple[int, int] | None = None,
    spacing: str = "log",
    checks: bool = True,
) -> Comparison:
    """Compare two scenarios (or one scenario at two setpoints): maps on one grid and both setpoint checks.

    Parameters
    ----------
    sc_a, sc_b : Scenario
        Before and after; pass the same scenario twice to compare two setpoints of one tank.
    setpoint_a, setpoint_b : Setpoint, optional
        Default: each scenario's own feed (``tau_nominal``, ``T_in``).
    tau_range, T_in_range, points, spacing
        The shared map window, as ``compare_maps``.
    checks : bool
        Run ``check_setpoint`` on both sides (the upset battery makes this the slow part).

    Returns
    -------
    Comparison
    """
    from exomap.core.check import check_setpoint

    sp_a = setpoint_a or Setpoint(sc_a.tau_nominal, sc_a.T_in)
    sp_b = setpoint_b or Setpoint(sc_b.tau_nominal, sc_b.T_in)
    mc = compare_maps(sc_a, sc_b, tau_range=tau_range, T_in_range=T_in_range, points=points, spacing=spacing)
    ca = cb = None
    if checks:
        ca = check_setpoint(sc_a, tau=sp_a.tau, T_in=sp_a.T_in, branch=sp_a.branch)
        cb = check_setpoint(sc_b, tau=sp_b.tau, T_in=sp_b.T_in, branch=sp_b.branch)
    success = mc.success and all(getattr(c, "success", True) for c in (ca, cb) if c is not None)
    return Comparison(sc_a, sc_b, sp_a, sp_b, mc, ca, cb, bool(success), mc.message)
