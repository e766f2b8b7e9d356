import sys, warnings
sys.path.insert(0, "tests")
warnings.simplefilter("error", RuntimeWarning)
from reference.scenarios import random_case
from exomap.schema import parse_scenario
from exomap.core.branch import branch
from exomap.core.steady import steady_states
from exomap.core.opmap import operating_map
from exomap.core.regions import REGIONS
keys={c:k for c,k,_ in REGIONS}
def sc_(seed): return parse_scenario(random_case(seed).doc).to_core()
try:
    b = branch(sc_(101001), "residence_time", None, 384.0099); print("101001", [(t.kind, round(t.tau,3), round(t.T,3)) for t in b.turning_points])
except Exception as e: print("101001 EXC", repr(e)[:150])
for seed in (100860,):
    try:
        s=sc_(seed); m=operating_map(s, points=(8,10)); print(seed, "map", m.success, m.message)
    except Exception as e: print(seed, "EXC", repr(e)[:150])
s=sc_(101096); m=operating_map(s, points=(8,10))
import numpy as np
j=int(np.argmin(abs(m.tau-145.66493692771616))); i=int(np.argmin(abs(m.T_in-337.93680933037456)))
print("101096", m.success, m.state_count[i,j], keys[int(m.region[i,j])], m.max_temperature[i,j])
for seed in (100932, 100980, 101168):
    s=sc_(seed); m=operating_map(s, points=(8,10)); print(seed, m.success, np.unique([keys[int(r)] for r in m.region.ravel()], return_counts=True))
