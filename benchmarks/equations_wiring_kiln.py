"""Kiln demo through preflight.check with the spike switches: adjacent pairs, orientation, basis, flags.

    python benchmarks/equations_wiring_kiln.py skeleton|union|trusted-union [rows]
"""
import os
import sys
import tempfile

import preflight
from preflight.demo import write_demo_csv

try:
    import preflight.equation_stage as es
    es.CANDIDATE_EDGES_FROM_PARENTS = sys.argv[1] != "skeleton"
    es.ONLY_TRUSTED_PARENT_EDGES = sys.argv[1] == "trusted-union"
except ImportError:
    pass
rows = int(sys.argv[2]) if len(sys.argv) > 2 else 2000
with tempfile.TemporaryDirectory() as d:
    path = write_demo_csv(os.path.join(d, "kiln.csv"), n=rows)
    r = preflight.check(path).data
print(sys.argv[1:], r["conclusion"]["level"], "oriented", r["conclusion"]["edges_oriented"], "of", r["conclusion"]["edges_total"], r["conclusion"]["rules_fired"])
for p in r["pairs"]:
    if p["adjacent"]:
        print(f'  {p["x"]:>15} {p["y"]:<15} {p["orientation"]:12} {str(p["basis"]):22} {p["flags"]}')
