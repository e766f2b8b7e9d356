import sys, numpy as np
sys.path.insert(0,"tests/core")
from conftest import make_cstr, make_series
from dataclasses import replace
from exomap.core.steady import steady_states
from exomap.core.opmap import operating_map
from exomap.core.branch import branch
c=make_cstr(20.0, 8.0, kappa=1e-3)
sc=replace(c.sc, c_in=(0.0, 500.0))
r=steady_states(sc, 1000.0, 350.0); print(r.success, r.message, [(s.T, s.stability) for s in r.states])
m=operating_map(sc, tau_range=(100, 1e4), T_in_range=(300,400), points=(20,20)); print(m.success, np.unique(m.region, return_counts=True), m.message)
b=branch(sc, "residence_time", 1000., 350.); print(b.success, b.message)
b=branch(sc, "feed_temperature", 1000., 350.); print(b.success, b.message, set(p.stable for p in b.points))
s=make_series(); sc=replace(s, c_in=(0.0, 0.0, 100.0))
m=operating_map(sc, tau_range=(100, 1e4), T_in_range=(300,400), points=(20,20)); print(m.success, np.unique(m.region, return_counts=True), m.message)
r=steady_states(sc, 1000.0, 350.0); print(r.success, r.message, [(s.T, s.stability) for s in r.states])
