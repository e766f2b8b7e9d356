"""Every demo scenario in ``scenarios/``: loaded, validated, round-tripped, run at its nominal point, and the
behaviour its description promises checked with independent numpy/scipy calculations (not the core's).

The single-reaction demos have explicit steady states: with conversion X of the key reactant, the species
balance gives the extent rate r = c0 X / tau and the energy balance gives T as an explicit function of X
(analytic; DESIGN.md §2):

    rho cp (T_in - T)/tau + (-dH) c0 X/tau - (UA_j (T - T_c) + UA_l (T - T_amb) - P)/V = 0

so the steady states are the roots in X of  c0 X/tau - r(X, T(X)) = 0, found here on a fine grid + brentq.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
from exomap.cli import demo_names, main
from exomap.core import valve
from exomap.core.model import Kinetics, Model, nominal_inputs
from exomap.core.scenario import R_GAS
from exomap.schema import canonical_json, parse_scenario, scenario_id
from scipy.optimize import brentq

# not imported from conftest: several test folders have a conftest module and the name is ambiguous
SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
NAMES = sorted(p.stem for p in SCENARIOS.glob("*.json"))


def core_of(name: str):
    return parse_scenario(json.loads((SCENARIOS / f"{name}.json").read_text(encoding="utf-8"))).to_core()


def test_the_four_demos_are_there_and_bundled():
    assert {"adiabatic-second-order", "jacketed-first-order", "mild-single-state", "product-decomposition"} <= set(
        NAMES
    )
    # the installed package exomap.demos serves the same files
    assert demo_names() == NAMES


@pytest.mark.parametrize("name", NAMES)
def test_demo_loads_validates_round_trips(name):
    doc = json.loads((SCENARIOS / f"{name}.json").read_text(encoding="utf-8"))
    assert "Invented example, not plant data" in doc["description"]
    sc = parse_scenario(doc).to_core()
    text = canonical_json(doc)
    assert canonical_json(json.loads(text)) == text
    assert scenario_id(json.loads(text)) == scenario_id(doc)
    assert re.fullmatch(r"[0-9a-f]{16}", scenario_id(doc))
    lim = sc.limits
    assert None not in (lim.T_alarm, lim.h_high, lim.h_low) and lim.T_alarm < lim.T_max
    assert lim.h_low < sc.vessel.h_set < lim.h_high <= sc.vessel.H
    assert sc.map is not None
    (t_lo, t_hi), (T_lo, T_hi) = sc.map.tau_range, sc.map.T_in_range
    assert t_lo < sc.tau_nominal < t_hi and T_lo < sc.T_in < T_hi
    # plausible organic liquid-phase numbers (common practice): rho, cp, volume, Ea
    assert 800 <= sc.rho <= 1000 and 1800 <= sc.cp <= 2500 and 1.0 <= sc.vessel.V_set <= 3.0
    assert all(60e3 <= r.Ea <= 120e3 or r.decomposition for r in sc.reactions)
    # the valve passes the nominal flow at the set level inside its usable range, 20-80 % (common practice)
    assert 0.2 <= valve.opening_for_flow(sc, sc.q_in) <= 0.8


@pytest.mark.parametrize("name", NAMES)
def test_nominal_states_satisfy_the_balances(name):
    from exomap.core.steady import steady_states

    sc = core_of(name)
    result = steady_states(sc, sc.tau_nominal, sc.T_in)
    assert result.success and result.states
    temps = [s.T for s in result.states]
    assert temps == sorted(temps)
    model = Model(sc)
    u = nominal_inputs(sc, tau=sc.tau_nominal, T_in=sc.T_in)
    c_scale = max(sc.c_in)
    for s in result.states:
        dy = model.rhs(0.0, model.pack(sc.vessel.h_set, np.array(s.C), s.T, 0.0), u)
        # analytic: every balance is zero at a steady state. Tolerance: a residual rate that would move a
        # concentration by 1e-9 of the feed strength, or the temperature by 1e-6 K, in one residence time.
        assert np.all(np.abs(dy[1 : 1 + sc.n_species]) * sc.tau_nominal <= 1e-9 * c_scale)
        assert abs(dy[1 + sc.n_species]) * sc.tau_nominal <= 1e-6
        # the valve opening reported passes the feed at the set level, so the level row is zero too
        assert abs(dy[0]) * sc.tau_nominal <= 1e-9 * sc.vessel.h_set


# -- single-reaction steady states computed here -----------------------------------------------------------
def explicit_states(sc, tau: float, T_in: float, n: int = 20001) -> list[tuple[float, float]]:
    """(X, T) of every steady state of a one-reaction scenario, from the explicit T(X)."""
    (r,) = sc.reactions
    key = sc.key_species
    c0 = sc.c_in[key]
    V = sc.vessel.V_set
    rc = sc.rho * sc.cp

    def T_of(X):
        num = (
            rc * T_in / tau
            + (-r.dH) * c0 * X / tau
            + (sc.UA_jacket * sc.T_c + sc.UA_loss * sc.T_amb + sc.P_agitator) / V
        )
        return num / (rc / tau + (sc.UA_jacket + sc.UA_loss) / V)

    def residual(X):
        T = T_of(X)
        C = np.array(sc.c_in) + np.outer(np.atleast_1d(X), np.array(r.nu)) * c0 / -r.nu[key]
        rate = r.k0 * np.exp(-r.Ea / (R_GAS * T)) * np.prod(np.maximum(C, 0.0) ** np.array(r.orders), axis=1)
        return c0 * X / tau - rate

    X = np.linspace(0.0, 1.0 - 1e-12, n)
    g = residual(X)
    out = []
    for i in np.nonzero(np.sign(g[1:]) != np.sign(g[:-1]))[0]:
        x = brentq(lambda v: float(residual(v)[0]), X[i], X[i + 1], xtol=1e-15, rtol=1e-15)
        out.append((x, float(T_of(x))))
    return out


def test_adiabatic_demo_three_states_low_middle_high():
    from exomap.core.steady import steady_states

    sc = core_of("adiabatic-second-order")
    assert sc.UA_jacket == 0 and sc.UA_loss == 0
    ours = explicit_states(sc, sc.tau_nominal, sc.T_in)
    assert len(ours) == 3
    result = steady_states(sc, sc.tau_nominal, sc.T_in)
    assert [s.stability for s in result.states] == ["stable", "saddle", "stable"]
    # analytic (explicit adiabatic S-curve above) against the core's roots
    np.testing.assert_allclose([s.T for s in result.states], [T for _, T in ours], rtol=1e-9)
    np.testing.assert_allclose([s.conversion for s in result.states], [x for x, _ in ours], rtol=1e-7, atol=1e-10)
    # nominal on the low branch, well below the limit; the hot branch above the maximum temperature
    assert result.states[0].T < sc.limits.T_alarm
    assert result.states[2].T > sc.limits.T_max


def test_adiabatic_demo_multiplicity_range_and_turning_points():
    from exomap.core.branch import branch

    sc = core_of("adiabatic-second-order")
    (r,) = sc.reactions
    c0 = sc.c_in[0]
    dT_ad = -r.dH * c0 / (sc.rho * sc.cp)
    X = np.linspace(1e-6, 1 - 1e-6, 400001)
    T = sc.T_in + dT_ad * X
    # analytic: adiabatic steady state T = T_in + dT_ad X and tau = c0 X / (k(T) c0^2 (1 - X)^2)
    tau = X / (r.k0 * np.exp(-r.Ea / (R_GAS * T)) * c0 * (1 - X) ** 2)
    d = np.diff(tau)
    ext = np.nonzero(np.sign(d[1:]) != np.sign(d[:-1]))[0] + 1
    assert len(ext) == 2
    tau_ignition, tau_extinction = tau[ext[0]], tau[ext[1]]
    # three states over a practical residence-time range, roughly 10-120 min, around the nominal point
    assert 10 * 60 < tau_extinction < sc.tau_nominal < tau_ignition < 120 * 60
    res = branch(sc, "residence_time", T_in=sc.T_in, lo=5 * 60.0, hi=200 * 60.0)
    kinds = {t.kind: t for t in res.turning_points}
    assert set(kinds) == {"ignition", "extinction"}
    # grid extrema of the explicit curve (spacing 2.5e-6 in X; tau is flat there) against the core's
    assert kinds["ignition"].tau == pytest.approx(tau_ignition, rel=1e-6)
    assert kinds["extinction"].tau == pytest.approx(tau_extinction, rel=1e-6)


def jacobian_2x2(sc, tau: float, X: float, T: float) -> np.ndarray:
    """Jacobian of (C_A, T) of a first-order reaction with cooling (analytic differentiation)."""
    (r,) = sc.reactions
    c0 = sc.c_in[0]
    k = r.k0 * np.exp(-r.Ea / (R_GAS * T))
    dk = k * r.Ea / (R_GAS * T * T)
    C = c0 * (1 - X)
    J = -r.dH / (sc.rho * sc.cp)
    a = (sc.UA_jacket + sc.UA_loss) / (sc.rho * sc.cp * sc.vessel.V_set)
    return np.array([[-1 / tau - k, -dk * C], [J * k, -1 / tau - a + J * dk * C]])


def test_jacketed_demo_has_an_oscillatory_range():
    from exomap.core.steady import steady_states

    sc = core_of("jacketed-first-order")
    # Uppal, Ray & Poore (1974): a complex pair crossing into the right half plane needs strong cooling and a
    # large adiabatic-rise number B; here B = dT_ad Ea / (R T_in^2) and beta = UA tau / (rho cp V)
    (r,) = sc.reactions
    B = -r.dH * sc.c_in[0] / (sc.rho * sc.cp) * r.Ea / (R_GAS * sc.T_in**2)
    assert B > 10
    taus = np.geomspace(*sc.map.tau_range, 40)
    T_ins = np.linspace(*sc.map.T_in_range, 17)
    hopf = []
    for tau in taus:
        for T_in in T_ins:
            states = explicit_states(sc, tau, T_in, n=4001)
            if len(states) != 1:
                continue
            ev = np.linalg.eigvals(jacobian_2x2(sc, tau, *states[0]))
            if abs(ev[0].imag) > 0 and ev.real.max() > 0:
                hopf.append((tau, T_in))
    # a complex pair with positive real part over some part of the map window, including at the nominal
    # feed temperature for residence times longer than the nominal one
    assert len(hopf) >= 10
    tau_osc = 90 * 60.0
    ((X, T),) = explicit_states(sc, tau_osc, sc.T_in)
    ev = np.linalg.eigvals(jacobian_2x2(sc, tau_osc, X, T))
    assert ev.real.max() > 0 and abs(ev[0].imag) > 0
    core = steady_states(sc, tau_osc, sc.T_in)
    (s,) = core.states
    assert s.stability == "unstable" and s.oscillatory
    # the core's 3x3 block (A, P, T) has the same pair (P adds -1/tau)
    pair = sorted((e for e in s.eigenvalues if abs(e.imag) > 0), key=lambda e: e.imag)
    np.testing.assert_allclose(pair, sorted(ev, key=lambda e: e.imag), rtol=1e-6)
    nominal = steady_states(sc, sc.tau_nominal, sc.T_in).states
    assert len(nominal) == 1 and nominal[0].stability == "stable" and nominal[0].T < sc.limits.T_max


def test_mild_demo_one_stable_state_everywhere():
    sc = core_of("mild-single-state")
    worst = -np.inf
    for tau in np.geomspace(*sc.map.tau_range, 25):
        for T_in in np.linspace(*sc.map.T_in_range, 11):
            states = explicit_states(sc, tau, T_in, n=4001)
            assert len(states) == 1, (tau, T_in)
            ev = np.linalg.eigvals(jacobian_2x2(sc, tau, *states[0]))
            worst = max(worst, ev.real.max())
            assert states[0][1] < sc.limits.T_alarm
    assert worst < 0


def test_decomposition_demo_matters_only_when_hot():
    from exomap.core.steady import steady_states

    sc = core_of("product-decomposition")
    assert [r.decomposition for r in sc.reactions] == [False, True]
    assert sc.limits.T_mtt is not None and sc.limits.T_max < sc.limits.T_mtt
    kin = Kinetics.of(sc)
    (s,) = steady_states(sc, sc.tau_nominal, sc.T_in).states
    heat = kin.rates(np.array(s.C), s.T) * -sc.dH
    assert heat[1] / heat.sum() < 1e-3  # negligible at the nominal point
    # the decomposition releases far more heat per mole, with a higher activation energy
    main_r, decomp = sc.reactions
    assert decomp.dH < 3 * main_r.dH and decomp.Ea > main_r.Ea + 40e3
    # at short residence times a hot state exists, above the technical limit, heated mostly by decomposition
    hot = steady_states(sc, sc.map.tau_range[0], sc.T_in).states[-1]
    assert hot.T > sc.limits.T_mtt
    heat = kin.rates(np.array(hot.C), hot.T) * -sc.dH
    assert heat[1] / heat.sum() > 0.5


# -- the CLI on the demos ----------------------------------------------------------------------------------
def test_cli_steady_json_is_the_answer_document(capsys):
    from exomap.core.steady import steady_states

    rc = main(
        ["steady", "adiabatic-second-order", "--residence-time", "60 min", "--feed-temperature", "25 degC", "--json"]
    )
    out = json.loads(capsys.readouterr().out)
    assert rc == 0
    sc = core_of("adiabatic-second-order")
    # SI Brochure: 60 min = 3600 s, 25 degC = 298.15 K
    expected = json.loads(json.dumps(steady_states(sc, 3600.0, 298.15).to_dict()))
    assert out == expected
    assert [s["stability"] for s in out["states"]] == ["stable", "saddle", "stable"]


def test_cli_steady_table_in_plant_units(capsys):
    rc = main(["steady", str(SCENARIOS / "adiabatic-second-order.json"), "--residence-time", "60 min"])
    out = capsys.readouterr().out
    assert rc == 0
    assert "3 steady states" in out and "residence time 60.0 min" in out and "feed 25.0 degC" in out
    assert re.search(r"\n1 +\d+\.\d degC .* stable", out) and "saddle" in out
    assert "Cautions: Screening aid, not a design or safety basis." in out


@pytest.mark.parametrize(
    ("argv", "pattern"),
    [
        (
            ["steady", "adiabatic-second-order", "--residence-time", "60 m"],
            r"^error: --residence-time: '60 m' is not a time; expected a time",
        ),
        (["steady", "no-such-demo"], r"^error: scenario: no file 'no-such-demo' and no bundled demo"),
        (
            ["branch", "adiabatic-second-order", "--along", "feed-temperature", "--from", "60 degC", "--to", "0 degC"],
            r"^error: range: ",
        ),
    ],
)
def test_cli_errors_are_one_line_exit_2(capsys, argv, pattern):
    rc = main(argv)
    err = capsys.readouterr().err
    assert rc == 2
    assert re.search(pattern, err) and "Traceback" not in err


def test_cli_bad_scenario_file(tmp_path, capsys):
    bad = json.loads((SCENARIOS / "mild-single-state.json").read_text(encoding="utf-8"))
    bad["vessel"]["diameter"] = "-1 m"
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(bad), encoding="utf-8")
    assert main(["steady", str(path)]) == 2
    assert capsys.readouterr().err.startswith("error: vessel.diameter: must be positive, got -1 m; expected a length")


def test_cli_branch_reports_turning_points(capsys):
    rc = main(
        [
            "branch",
            "adiabatic-second-order",
            "--along",
            "residence-time",
            "--from",
            "5 min",
            "--to",
            "200 min",
            "--json",
        ]
    )
    out = json.loads(capsys.readouterr().out)
    assert rc == 0 and out["parameter"] == "residence_time"
    assert sorted(t["kind"] for t in out["turning_points"]) == ["extinction", "ignition"]


def test_cli_missing_command_module_is_one_line(monkeypatch, capsys):
    import exomap.cli as cli

    monkeypatch.setitem(cli.COMMANDS, "frobnicate", "a command whose module is not installed")
    assert main(["frobnicate", "x"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: frobnicate: this command is not available in this installation")
    assert "exomap.cli.frobnicate" in err and "Traceback" not in err


def test_cli_steady_loads_no_web_layer():
    import subprocess
    import sys

    # jinja2 is not checked by name: pint imports dask.base when dask is installed (the 'dask' extra, for batch
    # studies), and dask loads jinja2 for its notebook widgets; exomap's own web modules are checked instead.
    code = (
        "import sys; from exomap.cli import main; rc = main(['steady', 'mild-single-state', '--json']); "
        "assert rc == 0; bad = [m for m in sys.modules if m in ('fastapi', 'starlette', 'uvicorn') "
        "or m.startswith('exomap.web')]; assert not bad, bad"
    )
    subprocess.run([sys.executable, "-c", code], check=True, capture_output=True)


def test_adiabatic_demo_window_holds_the_cusp():
    sc = core_of("adiabatic-second-order")
    (r,) = sc.reactions
    c0 = sc.c_in[0]
    dT_ad = -r.dH * c0 / (sc.rho * sc.cp)
    X = np.linspace(1e-6, 1 - 1e-6, 200001)
    (t_lo, t_hi), (T_lo, T_hi) = sc.map.tau_range, sc.map.T_in_range
    last = None
    for T_in in np.arange(sc.T_in, T_hi, 0.5):
        # analytic adiabatic S-curve (see test_adiabatic_demo_multiplicity_range_and_turning_points)
        tau = X / (r.k0 * np.exp(-r.Ea / (R_GAS * (T_in + dT_ad * X))) * c0 * (1 - X) ** 2)
        d = np.diff(tau)
        ext = np.nonzero(np.sign(d[1:]) != np.sign(d[:-1]))[0] + 1
        if len(ext) != 2:
            break
        last = (T_in, tau[ext[1]], tau[ext[0]])
    else:
        pytest.fail("the multiplicity region does not close inside the feed-temperature window")
    # the two turning points merge (the cusp) inside the window, and the multiplicity range at the nominal
    # feed temperature is inside it too
    T_cusp, tau_ext, tau_ign = last
    assert T_lo < T_cusp < T_hi and t_lo < tau_ext <= tau_ign < t_hi
    # the map's own cusp lies between the last feed temperature with three states and the next step (0.5 K),
    # where the two turning points have nearly met (their residence times differ by < 1e-4 here)
    from exomap.core.opmap import operating_map

    cusps = operating_map(sc, points=(40, 40)).to_dict()["boundaries"]["cusp"]
    assert len(cusps) == 1
    tau_c, T_in_c = cusps[0][0], cusps[0][1]
    assert T_cusp <= T_in_c <= T_cusp + 0.5
    assert tau_c == pytest.approx(tau_ext, rel=2e-2)


def test_cli_plant_units():
    from exomap.cli import _format as fmt

    # SI Brochure §2.3.1 (degC) and Table 8 (min, h)
    assert fmt.celsius(303.15) == "30.0 degC"
    assert fmt.minutes(2670.0) == "44.5 min" and fmt.minutes(36000.0) == "10.0 h"
    assert fmt.flow(2.7 / 3600) == "2.70 m^3/h"
    assert fmt.percent(0.383) == "38 %"
    assert fmt.celsius(float("nan")) == "-" and fmt.percent(None) == "-"
    text = fmt.table(["a", "value"], [["x", "1.0"], ["long name", "22.5"]], right=[False, True])
    assert text.splitlines() == ["a          value", "---------  -----", "x            1.0", "long name   22.5"]
