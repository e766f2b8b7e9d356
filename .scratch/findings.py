import json, sys, glob, warnings, traceback
warnings.simplefilter("error", RuntimeWarning)
from exomap.schema import parse_scenario
from exomap.core.steady import steady_states
from exomap.core.opmap import operating_map
for f in sorted(glob.glob("/work/wt/diff/tests/reference/findings/*.json")):
    r = json.load(open(f)); sc = parse_scenario(r["scenario"]).to_core()
    name = f.split("/")[-1]
    try:
        pt = r.get("point")
        if pt:
            res = steady_states(sc, pt["tau"], pt["T_in"])
            print(name, res.success, [(round(s.T, 6), s.stability, min(s.C) >= 0, s.residual) for s in res.states])
        else:
            print(name, "no point", list(r))
        if "map" in r:
            print("  map keys", r["map"])
    except Exception as e:
        print(name, "EXC", repr(e)[:200])
