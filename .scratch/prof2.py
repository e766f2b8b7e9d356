import sys, json, cProfile, pstats
from pathlib import Path
root = sys.argv[1]; sys.path.insert(0, root + "/server")
from exomap.schema import parse_scenario
from exomap.core.opmap import operating_map
sc = parse_scenario(json.loads(Path(f"scenarios/{sys.argv[2]}.json").read_text())).to_core()
operating_map(sc)
cProfile.run("for _ in range(3): operating_map(sc)", "/tmp/core_prof2")
pstats.Stats("/tmp/core_prof2").sort_stats("tottime").print_stats(12)
