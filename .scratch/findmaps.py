import json, warnings, numpy as np
warnings.simplefilter("error", RuntimeWarning)
from exomap.schema import parse_scenario
from exomap.core.opmap import operating_map
from exomap.core.regions import REGIONS
keys={c:k for c,k,_ in REGIONS}
def load(n):
    r=json.load(open(f"/work/wt/diff/tests/reference/findings/{n}.json")); return r, parse_scenario(r["scenario"]).to_core()
r,sc=load("overflow-warning-in-stability"); p=r["point"]
m=operating_map(sc, tau_range=p["tau_range"], T_in_range=p["T_in_range"], points=p["points"]); print("overflow", m.success, m.message)
for n,(i,j),pts in [("map-false-unstable",(3,0),(8,10)),("map-nan-unstable",(0,0),(8,10)),("map-ignores-reaction-heat",(8,3),(8,10))]:
    r,sc=load(n)
    try:
        m=operating_map(sc, points=pts)
        print(n, m.success, m.message, keys[int(m.region[i,j])], m.state_count[i,j], m.max_temperature[i,j], m.tau[j], m.T_in[i])
    except Exception as e: print(n, "EXC", repr(e)[:300])
r,sc=load("spurious-negative-states")
m=operating_map(sc, points=(16,12)); j=np.argmin(abs(m.tau-620.006519331803)); print("spurious", m.success, m.tau[j], m.state_count[:,j])
