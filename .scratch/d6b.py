import sys, numpy as np, itertools, math
sys.path.insert(0,"tests/core")
from conftest import make_cstr
from exomap.core.branch import branch
c=make_cstr(20.0, 16., kappa=1e-2, k_ref=1e-3, T_c=300.0)
b=branch(c.sc, "residence_time", 1000., c.T_in, lo=1., hi=1e7)
iso=[p for p in b.points if p.piece==2]
taus=np.array([p.tau for p in iso]); Ts=np.array([p.T for p in iso])
print(len(iso), taus.min(), taus.max(), Ts.min(), Ts.max())
# duplicates
pts=sorted(zip(np.round(np.log(taus),6), np.round(Ts,4)))
print("unique", len(set(pts)))
for t in b.turning_points: print(t)
