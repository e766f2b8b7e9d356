import json, collections
from pathlib import Path
from exomap.schema import parse_scenario
from exomap.core import manifold
from exomap.core.opmap import operating_map
sc = parse_scenario(json.loads(Path("scenarios/product-decomposition.json").read_text())).to_core()
stats = collections.Counter()
orig = manifold.Manifold._iso_system
def wrap(self, lnk, y, lt, dT=None):
    stats["calls"] += 1; stats["pts"] += y.shape[0]
    return orig(self, lnk, y, lt, dT)
manifold.Manifold._iso_system = wrap
o2 = manifold.Manifold._isothermal
def w2(self, tau, T, C0=None, max_iter=100):
    r = o2(self, tau, T, C0, max_iter); stats["iso_calls"] += 1; stats["iso_pts"] += r[2].size; return r
manifold.Manifold._isothermal = w2
operating_map(sc)
print(stats, stats["pts"]/stats["iso_pts"])
