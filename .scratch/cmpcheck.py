import sys, time, json
from pathlib import Path
root = sys.argv[1]; sys.path.insert(0, root + "/server")
import exomap; assert exomap.__file__.startswith(root)
from exomap.schema import parse_scenario
from exomap.core.check import check_setpoint
out = {}
for name in sys.argv[2:]:
    sc = parse_scenario(json.loads(Path(f"scenarios/{name}.json").read_text())).to_core()
    check_setpoint(sc)
    ts = []
    for _ in range(3):
        t = time.process_time(); check_setpoint(sc); ts.append(time.process_time() - t)
    out[name] = round(sorted(ts)[1] * 1e3, 1)
print(root.split("/")[-1], out)
