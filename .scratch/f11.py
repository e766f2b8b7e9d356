import json, sys, warnings
sys.path.insert(0, "tests")
warnings.simplefilter("error", RuntimeWarning)
from reference.scenarios import random_case
from exomap.schema import parse_scenario
from exomap.core.branch import branch
from exomap.core.steady import steady_states
sc = parse_scenario(random_case(100477).doc).to_core()
b = branch(sc, "feed_temperature", 3503.5949313868496, 300.0, lo=265.658, hi=339.085)
print(b.success, b.message, [(t.kind, t.T_in, t.T) for t in b.turning_points])
for Tin in (294.03, 192.76, 265.952596-0.05, 265.952596+0.05):
    r = steady_states(sc, 3503.5949313868496, Tin); print(Tin, r.success, [(round(s.T,3), s.stability) for s in r.states])
sc = parse_scenario(random_case(100421).doc).to_core()
r = steady_states(sc, 82.66338866924423, 359.47461268071635); print(r.success, [(round(s.T,6), s.stability) for s in r.states])
sc = parse_scenario(random_case(100297).doc).to_core()
b = branch(sc, "residence_time", 5000.0, 329.4697013315332, lo=1172.6, hi=38328.9)
print(b.success, [(t.kind, t.tau, t.T) for t in b.turning_points], [(h.tau, h.T) for h in b.hopf_points])
