#!/usr/bin/python3
"""Solve the exported reference MILPs of testdata/milp with HiGHS.

Reads every NAME.json.gz written by `go run ./testdata/milp/export`
(scheduler.ReferenceMILP: a relaxation of the nightloom model, so its
optimum is an upper bound on the model's optimum, a "reference bound"),
solves it with HiGHS through scipy.optimize.milp (Debian's python3-scipy,
`apt-get install python3-scipy`; run with Debian's /usr/bin/python3) and
writes reference.json beside them: per instance the SHA-256 of the
uncompressed export, the solver's status, the incumbent (best integer
point found), the dual bound (an upper bound on the MILP's optimum, and so
on the model's, whether or not the time limit hit), the MIP gap, the wall
time, and the solver's name and version.

    /usr/bin/python3 testdata/milp/solve.py [--time-limit 1800] [names...]
"""
import argparse
import gzip
import hashlib
import json
import os
import platform
import sys
import time

import numpy as np
import scipy
from scipy.optimize import Bounds, LinearConstraint, milp
from scipy.sparse import coo_array

HERE = os.path.dirname(os.path.abspath(__file__))
BIG = 1e300  # the export's infinity


def inf(xs):
    a = np.asarray(xs, dtype=float)
    a[a >= BIG] = np.inf
    a[a <= -BIG] = -np.inf
    return a


def solve(path, time_limit, gap):
    raw = gzip.open(path, "rb").read()
    sha = hashlib.sha256(raw).hexdigest()
    m = json.loads(raw)
    n = m["vars"]
    A = coo_array((m["vals"], (m["rows"], m["cols"])), shape=(len(m["row_lo"]), n)).tocsr()
    c = -np.asarray(m["c"], dtype=float)  # milp minimises
    t0 = time.time()
    res = milp(c, integrality=np.asarray(m["integer"], dtype=int),
               bounds=Bounds(inf(m["lo"]), inf(m["hi"])),
               constraints=LinearConstraint(A, inf(m["row_lo"]), inf(m["row_hi"])),
               options={"time_limit": time_limit, "mip_rel_gap": gap, "disp": False})
    wall = time.time() - t0
    out = {"name": m["name"], "sha256": sha, "what": m["what"], "vars": n,
           "integer_vars": int(sum(m["integer"])), "rows": len(m["row_lo"]),
           "status": res.status, "message": res.message, "wall_s": round(wall, 1),
           "time_limit_s": time_limit, "mip_rel_gap_asked": gap}
    if res.x is not None:
        out["incumbent"] = -res.fun
    dual = getattr(res, "mip_dual_bound", None)
    if dual is not None and np.isfinite(dual):
        out["bound"] = -dual
    elif res.status == 0:
        out["bound"] = -res.fun
    if getattr(res, "mip_gap", None) is not None:
        out["mip_gap"] = res.mip_gap
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--time-limit", type=float, default=1800)
    ap.add_argument("--gap", type=float, default=1e-4)
    ap.add_argument("names", nargs="*")
    a = ap.parse_args()
    names = a.names or sorted(f[:-len(".json.gz")] for f in os.listdir(HERE) if f.endswith(".json.gz"))
    table_path = os.path.join(HERE, "reference.json")
    table = {}
    if os.path.exists(table_path):
        table = {r["name"]: r for r in json.load(open(table_path))["instances"]}
    for name in names:
        r = solve(os.path.join(HERE, name + ".json.gz"), a.time_limit, a.gap)
        print(json.dumps(r), file=sys.stderr)
        table[name] = r
    doc = {"solver": "HiGHS via scipy.optimize.milp", "scipy": scipy.__version__,
           "python": platform.python_version(), "machine": platform.machine(),
           "generated_by": "testdata/milp/solve.py",
           "instances": [table[k] for k in sorted(table)]}
    with open(table_path, "w") as f:
        json.dump(doc, f, indent=1, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main()
