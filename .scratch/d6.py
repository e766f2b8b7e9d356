import sys, numpy as np, itertools, math
sys.path.insert(0,"tests/core")
from conftest import make_cstr
from exomap.core.branch import branch
for B, kappa, dTc in itertools.product([10., 16., 25.], [1e-3, 1e-2], [-20., -50.]):
    c=make_cstr(20.0, B, kappa=kappa, k_ref=1e-3, T_c=350.0+dTc)
    b=branch(c.sc, "residence_time", 1000., c.T_in, lo=1., hi=1e7)
    pieces={}
    for p in b.points: pieces.setdefault(p.piece, []).append(p)
    info=[(k, len(v), round(v[0].tau,1), round(v[-1].tau,1), round(v[0].T,1), round(v[-1].T,1)) for k,v in pieces.items()]
    print(B, kappa, dTc, len(b.turning_points), info)
