"""An example external case for the ``command`` evaluator (a stand-in for a CFD run).

It reads ``params.json`` in its case folder and writes ``result.json`` with one
number per response. The formula is an invented smooth function of the two
parameters; it stands where a real study would start a CFD solver.
"""
import json
import math
import sys
from pathlib import Path

case = Path(sys.argv[1])
p = json.loads((case / "params.json").read_text())
a = math.radians(p["wing_aoa"])
h = p["wing_height"] / 1000.0
lift = -0.9 * math.sin(2 * a) * (1 + 0.3 * math.exp(-h / 0.1))
drag = 0.02 + 0.15 * lift**2
(case / "result.json").write_text(json.dumps({"cla_wing": lift, "cda_wing": drag}))
