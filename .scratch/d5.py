import sys
root=sys.argv[1]; sys.path.insert(0, root+"/server"); sys.path.insert(0,"tests/core")
from conftest import make_series
from exomap.core.branch import branch
for UA in (2000.0, 5000.0, 10000.0):
    for Tin in (260.0, 280.0, 300.0):
        sc = make_series(UA=UA, T_c=300.0)
        b = branch(sc, "residence_time", 1000.0, Tin, lo=50.0, hi=5e4)
        print(root[-4:], UA, Tin, len(b.turning_points), [(round(h.tau,3), round(h.T,3)) for h in b.hopf_points])
