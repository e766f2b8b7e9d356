import cProfile, pstats, time, sys
from exomap.schema import parse_scenario
import json, importlib.resources as ir
from pathlib import Path
name = sys.argv[1] if len(sys.argv)>1 else "adiabatic-second-order"
doc = json.loads(Path(f"scenarios/{name}.json").read_text())
sc = parse_scenario(doc).to_core()
from exomap.core.opmap import operating_map
operating_map(sc)
ts=[]
for _ in range(7):
    t=time.perf_counter(); r=operating_map(sc); ts.append(time.perf_counter()-t)
print(sorted(ts)[3]*1e3, "ms", r.message)
if len(sys.argv)>2:
    cProfile.run("for _ in range(5): operating_map(sc)", "/tmp/core_prof")
    pstats.Stats("/tmp/core_prof").sort_stats("tottime").print_stats(15)
