import math, numpy as np, sys
sys.path.insert(0, "tests/core")
from conftest import vessel, volume, RHO, CP
from exomap.core.scenario import *
from exomap.core.steady import steady_states
from exomap.core.opmap import operating_map
def sc_hot(k0, Ea=200e3, dTad=250.0, T_max=600.0):
    c=1000.0
    dH=-dTad*RHO*CP/c
    return Scenario(species=("A","P"), rho=RHO, cp=CP, vessel=vessel(), valve=Valve(Kv=40, opening=0.5),
      reactions=(Reaction("A->P",(-1.,1.),(1.,0.),k0,Ea,dH),), q_in=volume()/60, T_in=420.0, c_in=(c,0.), limits=Limits(T_max=T_max))
for k0 in [1e10,1e12,1e14,1e16,1e18,1e20]:
    sc=sc_hot(k0)
    r=steady_states(sc,60.0,420.0)
    print(k0, r.success, r.message, [(round(s.T,2), s.stability, s.conversion) for s in r.states])
print("---")
for k0 in [1e22,1e24,1e26,1e28,1e30,1e33]:
    sc=sc_hot(k0)
    r=steady_states(sc,60.0,420.0)
    print(k0, r.success, r.message, [(round(s.T,2), s.stability, 1-s.conversion, s.C) for s in r.states])
