import json, copy
from exomap.schema import parse_scenario
from exomap.schema.errors import ScenarioError
doc=json.load(open("scenarios/mild-single-state.json"))
d=copy.deepcopy(doc); d["reactions"][0]["orders"]={"A":1,"Q":2}
try: parse_scenario(d).to_core()
except ScenarioError as e: print(e.errors)
d=copy.deepcopy(doc); d["reactions"][0]["orders"]={"A":1,"Q":2}; d["vessel"]["diameter"]="3 kg"
try: parse_scenario(d).to_core()
except ScenarioError as e: print(e.errors)
d=copy.deepcopy(doc); d["reactions"][0]["orders"]={"A":1,"Q":2}; d["species"]="A"
try: parse_scenario(d).to_core()
except ScenarioError as e: print(e.errors)
print("--")
d=copy.deepcopy(doc); d["reactions"][0]["orders"]={"Q":2}; d["reactions"][0]["pre_exponential"]="1e3 L/(mol s)"
try: parse_scenario(d).to_core()
except ScenarioError as e: print(e.errors)
