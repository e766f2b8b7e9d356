import sys, time, json
from pathlib import Path
root = sys.argv[1]; sys.path.insert(0, root + "/server")
import exomap; assert exomap.__file__.startswith(root), exomap.__file__
from exomap.schema import parse_scenario
from exomap.core.opmap import operating_map
out = {}
for name in sys.argv[2:]:
    sc = parse_scenario(json.loads(Path(f"scenarios/{name}.json").read_text())).to_core()
    operating_map(sc)
    ts = []
    for _ in range(5):
        t = time.process_time(); operating_map(sc); ts.append(time.process_time() - t)
    out[name] = round(sorted(ts)[2] * 1e3, 1)
print(root.split("/")[-1], out)
