import math, numpy as np, sys, traceback
sys.path.insert(0, "tests/core")
from conftest import vessel, volume, RHO, CP
from exomap.core.scenario import *
from exomap.core.steady import steady_states
from exomap.core.branch import branch
def sc3(UA=20000.0, T_c=300.0):
    r1 = Reaction("A -> B", (-1.,1.,0.,0.), (1.,0.,0.,0.), 5e8, 75e3, -100e3)
    r2 = Reaction("B -> C", (0.,-1.,1.,0.), (0.,1.,0.,0.), 3e11, 100e3, -120e3)
    r3 = Reaction("2A -> D", (-2.,0.,0.,1.), (2.,0.,0.,0.), 1e4, 70e3, -80e3)
    return Scenario(species=("A","B","C","D"), rho=RHO, cp=CP, vessel=vessel(), valve=Valve(Kv=40, opening=0.5),
      reactions=(r1,r2,r3), q_in=volume()/600, T_in=300.0, c_in=(10000.,0,0,0), limits=Limits(T_max=500.0), UA_jacket=UA, T_c=T_c)
sc=sc3()
rng=np.random.default_rng(1)
bad=0
for i in range(60):
    tau=float(np.exp(rng.uniform(np.log(10),np.log(1e5)))); Tin=float(rng.uniform(250,400))
    try:
        r=steady_states(sc,tau,Tin)
        if not r.success: print("nosuccess",tau,Tin,r.message)
    except Exception as e:
        bad+=1; print("CRASH",tau,Tin,repr(e)[:100])
print("bad",bad)
