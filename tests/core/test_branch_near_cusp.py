"""Turning points along the residence time right next to a cusp, where the fold pair is far closer together
than one continuation step. Checked against the point solver: between the two folds the tank has three steady
states, just outside them one."""

import pytest
from exomap.cli import load_scenario
from exomap.core.branch import branch
from exomap.core.opmap import operating_map
from exomap.core.steady import steady_states


@pytest.fixture(scope="module")
def jacketed():
    sc = load_scenario("jacketed-first-order")
    cusp = operating_map(sc).boundaries["cusp"]
    assert len(cusp) == 1  # the demo's window holds one cusp (scenarios/jacketed-first-order.json)
    return sc, cusp[0]


@pytest.mark.parametrize("below_cusp_K", [1.0, 0.12, 0.02])
def test_fold_pair_next_to_the_cusp_is_found(jacketed, below_cusp_K):
    sc, (tau_c, T_in_c, _) = jacketed
    T_in = T_in_c - below_cusp_K
    folds = branch(sc, "residence_time", T_in=T_in).turning_points
    near = sorted((tp for tp in folds if abs(tp.tau / tau_c - 1) < 0.05), key=lambda tp: tp.tau)
    assert [tp.kind for tp in near] == ["ignition", "extinction"]
    a, b = near[0].tau, near[1].tau
    gap = b - a
    # independent check by the point solver (root counting along the temperature, not continuation):
    # three states strictly between the folds, one just outside (analytic meaning of a fold pair)
    assert len(steady_states(sc, 0.5 * (a + b), T_in).states) == 3
    assert len(steady_states(sc, a - gap, T_in).states) == 1
    assert len(steady_states(sc, b + gap, T_in).states) == 1
