"""Semenov's criterion for thermal explosion, checked on the simulator.

A closed, jacketed tank (feed stopped, outlet blocked) of a first-order exothermic reaction with a very large
adiabatic temperature rise, so that hardly any reactant is used up while the temperature settles (the
zero-consumption limit Semenov's theory assumes). In the Semenov number

    psi = V (-dH) k(T_a) C0 E / (UA R T_a^2)

the tank settles at a small rise theta = E (T - T_a) / (R T_a^2) below the criticality psi_c = 1/e, the root of
theta exp(-theta) = psi, and runs away above it.

References
----------
[1] N. N. Semenov, Zur Theorie des Verbrennungsprozesses, Z. Phys. 48 (1928) 571-582.
[2] D. A. Frank-Kamenetskii, Diffusion and Heat Transfer in Chemical Kinetics, 2nd ed., Plenum, 1969, ch. VI
    (psi_c = 1/e, critical rise R T_a^2 / E; from memory).
"""

import math

import pytest
from exomap.core.dynamics import simulate
from exomap.core.scenario import R_GAS, Limits, Reaction, Scenario, Valve, Vessel
from scipy.optimize import brentq

T_A = 350.0  # ambient = coolant temperature [K]
EA = 100e3  # [J/mol]
RHO, CP, C0 = 1000.0, 2000.0, 5000.0
B = 2000.0  # dimensionless adiabatic rise: consumption during the settling is ~ psi / B, negligible
T_C = 100.0  # thermal relaxation time rho cp V / UA [s]


def closed_tank(psi: float) -> Scenario:
    vessel = Vessel(D=1.0, H=1.5, h_set=1.0)
    V = vessel.V_set
    UA = RHO * CP * V / T_C
    dT_scale = R_GAS * T_A**2 / EA
    dT_ad = B * dT_scale
    dH = -dT_ad * RHO * CP / C0
    # psi = k t_c B  (write out psi with UA = rho cp V / t_c and dT_ad = (-dH) C0 / (rho cp))
    k_a = psi / (B * T_C)
    k0 = k_a * math.exp(EA / (R_GAS * T_A))
    return Scenario(
        species=("A", "P"),
        rho=RHO,
        cp=CP,
        vessel=vessel,
        valve=Valve(Kv=10.0, opening=0.5),
        reactions=(Reaction("A -> P", (-1.0, 1.0), (1.0, 0.0), k0, EA, dH),),
        q_in=V / 3600.0,
        T_in=T_A,
        c_in=(C0, 0.0),
        limits=Limits(T_max=T_A + 100.0),
        UA_jacket=UA,
        T_c=T_A,
    )


def run(psi: float):
    sc = closed_tank(psi)
    events = [{"at": 0.0, "do": "feed_stop"}, {"at": 0.0, "do": "outlet_block"}]
    initial = {"level": sc.vessel.h_set, "concentrations": {"A": C0}, "temperature": T_A}
    return simulate(sc, initial=initial, events=events, duration=30 * T_C)


def theta(T: float) -> float:
    return EA * (T - T_A) / (R_GAS * T_A**2)


@pytest.mark.parametrize("psi_over_critical", [0.5, 0.9])
def test_below_semenov_criticality_the_tank_settles_at_the_semenov_root(psi_over_critical):
    psi = psi_over_critical / math.e
    res = run(psi)
    # Semenov [1]: the settled rise is the smaller root of the heat balance theta = psi exp(theta), written here
    # with the full Arrhenius factor exp(theta / (1 + theta / gamma)) instead of Semenov's exponential
    # approximation (analytic; gamma = E / (R T_a) = 34 makes the two differ by ~1.5 % at psi = 0.9/e)
    gamma = EA / (R_GAS * T_A)
    theta_star = brentq(lambda th: th * math.exp(-th / (1.0 + th / gamma)) - psi, 0.0, 1.2)
    settled = theta(res.T[-1])
    # consumption over 30 relaxation times is about 30 psi / B < 1 %, and it only lowers the rise; near the
    # criticality d theta / d psi = e^theta / (1 - theta) amplifies it to ~1.5 % at psi = 0.9/e
    assert settled == pytest.approx(theta_star, rel=0.02)
    assert settled <= theta_star
    assert theta(res.peak_T) < 1.0  # below the critical rise R T_a^2 / E [2]


@pytest.mark.parametrize("psi_over_critical", [1.1, 1.5])
def test_above_semenov_criticality_the_tank_runs_away(psi_over_critical):
    psi = psi_over_critical / math.e
    res = run(psi)
    # Semenov [1]: no steady state above psi_c = 1/e; the rise passes far beyond R T_a^2 / E (here 100 K
    # above T_a is about 10 R T_a^2 / E)
    assert res.peak_T > T_A + 100.0


def _closed_run(psi: float, until_settled: bool):
    sc = closed_tank(psi)
    events = [{"at": 0.0, "do": "feed_stop"}, {"at": 0.0, "do": "outlet_block"}]
    initial = {"level": sc.vessel.h_set, "concentrations": {"A": C0}, "temperature": T_A}
    return simulate(sc, initial=initial, events=events, duration=86400.0, until_settled=until_settled)


@pytest.mark.parametrize("psi_over_critical", [0.5, 0.9, 1.03, 1.1])
def test_stopping_when_settled_never_cuts_off_the_peak(psi_over_critical):
    # below, near (the slow passage of 1.03/e, where consumption finally stops the runaway) and above Semenov's
    # criticality: a run that stops once settled has the peak of the run that goes the whole day (invariant)
    psi = psi_over_critical / math.e
    short, full = _closed_run(psi, True), _closed_run(psi, False)
    assert short.peak_T == pytest.approx(full.peak_T, rel=1e-4)
    assert short.peak_t == pytest.approx(full.peak_t, rel=1e-2)
    if short.stop_reason == "settled":
        # where it stopped, the whole-day run has moved less than the settle thresholds allow since
        later = full.T[full.t >= short.t_end]
        assert abs(float(later[0]) - float(short.T[-1])) < 0.05
        assert float(later.max()) <= short.T[-1] + 0.1 * (full.t_end - short.t_end) / 3600.0 + 0.05
