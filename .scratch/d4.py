import sys, math, numpy as np
sys.path.insert(0,"tests/core")
from conftest import make_cstr, Reference as ref
from exomap.core import steady as steady_mod, branch as branch_mod
from exomap.core.manifold import Manifold
from exomap.core.steady import steady_states
from exomap.core.branch import branch
class G(Manifold):
    def __init__(self,*a,**k):
        super().__init__(*a,**k); self.explicit=False
g=20.0
for general in (False, True):
    if general:
        steady_mod.Manifold=G; branch_mod.Manifold=G
    for eps in [1e-4, 1e-5, 1e-6, 1e-7]:
        B=ref.B_cusp(g)*(1+eps)
        xs=ref.fold_x(B,g); Das=sorted(ref.G(xs,B,g)); Da=math.sqrt(Das[0]*Das[1])
        c=make_cstr(g,B)
        n_ref=len(ref.roots_x(Da,B,g))
        r=steady_states(c.sc,c.tau(Da),c.T_in)
        b=branch(c.sc,"feed_temperature",c.tau(Da),c.T_in, lo=c.T_in-5, hi=c.T_in+5)
        Ts=[c.T_of_y(B*x) for x in xs]
        print(general, eps, "fold T", np.round(Ts,4), "ref", n_ref, "exomap", len(r.states), r.success, "branch turns", len(b.turning_points))
