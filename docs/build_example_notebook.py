"""Build docs/example.ipynb with nbformat (no outputs; the test suite executes it).

    python docs/build_example_notebook.py

The greenhouse is invented: a heater warms the air, the air warms the
leaves, the leaves and the soil's moisture set the growth rate.  The noise
terms are skewed or flat, so a linear non-Gaussian analysis can orient the
edges; the second batch bends the leaf response to warm air, as if a new
sensor saturated, so the two reports differ.
"""

from __future__ import annotations

import os

import nbformat
from nbformat.v4 import new_code_cell, new_markdown_cell, new_notebook

HERE = os.path.dirname(os.path.abspath(__file__))
PATH = os.path.join(HERE, "example.ipynb")

CELLS = [
    ("md", """# preflight in a notebook

An invented greenhouse table, checked before any causal-discovery step: the report's
display, its tables as DataFrames, the graph and background knowledge handed to the
discovery step, and the comparison of two batches."""),
    ("code", """import numpy as np
import pandas as pd

import preflight


def greenhouse(rows, seed, leaf_bend=0.0):
    \"\"\"Heater -> air -> leaf -> growth <- soil moisture; skewed and flat noise terms.\"\"\"
    rng = np.random.default_rng(seed)
    heater_power = rng.uniform(0, 10, rows)
    air_temp = 14 + 0.9 * heater_power + rng.exponential(1.5, rows)
    warmth = air_temp - air_temp.mean()
    leaf_temp = 0.8 * air_temp + leaf_bend * np.tanh(warmth) + rng.uniform(-1.5, 1.5, rows)
    soil_moisture = rng.gamma(2.0, 5.0, rows)
    growth_rate = 0.5 * leaf_temp + 0.2 * soil_moisture + rng.exponential(1.0, rows)
    return pd.DataFrame({"heater_power": heater_power, "air_temp": air_temp, "leaf_temp": leaf_temp,
                         "soil_moisture": soil_moisture, "growth_rate": growth_rate})


batch = greenhouse(400, seed=1)
batch.head()"""),
    ("md", """## The report

`preflight.check` takes a DataFrame as well as a file. In a notebook the report shows
its conclusion, the edges and the reasons; `repr` gives the same in a few lines of text."""),
    ("code", """report = preflight.check(batch, seed=7, jobs=1)
report"""),
    ("code", """print(repr(report))"""),
    ("md", """## Its tables as DataFrames

One row per pair, per variable, and per check (long form: the scope says whether a
check belongs to a variable, a pair or the whole table)."""),
    ("code", """report.pairs_frame().query("adjacent")"""),
    ("code", """report.variables_frame()"""),
    ("code", """checks = report.checks_frame()
checks[checks["passed"].eq(False)][["scope", "variable", "x", "y", "name", "p_adjusted", "effect"]]"""),
    ("md", """## What the discovery step receives

The background knowledge: the directions the conclusion licenses, the pairs to keep
apart (not adjacent) and the edges whose direction the discovery step must find itself.
The same graph goes to a file with `report.write_graph` (`.dot`, `.graphml` or `.json`)
or `preflight check ... --graph-out PATH`."""),
    ("code", """knowledge = report.background_knowledge()
knowledge.to_dict()"""),
    ("code", """import networkx as nx

report.write_graph("greenhouse-graph.graphml")
graph = nx.read_graphml("greenhouse-graph.graphml")
sorted(graph.edges(data="basis"))"""),
    ("md", """## The next batch

The second batch comes from a bent leaf sensor. `preflight.compare_reports` (and
`preflight compare OLD.json NEW.json` on the command line) shows what changed and
whether the drift gate fails."""),
    ("code", """next_report = preflight.check(greenhouse(400, seed=2, leaf_bend=6.0), seed=7, jobs=1)
comparison = preflight.compare_reports(report, next_report)
print(comparison)"""),
]


def build() -> nbformat.NotebookNode:
    notebook = new_notebook()
    notebook.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    notebook.metadata["language_info"] = {"name": "python"}
    for kind, source in CELLS:
        notebook.cells.append(new_markdown_cell(source) if kind == "md" else new_code_cell(source))
    # Stable cell ids, so rebuilding the notebook changes nothing.
    for number, cell in enumerate(notebook.cells):
        cell["id"] = f"cell-{number:02d}"
    return notebook


if __name__ == "__main__":
    nbformat.write(build(), PATH)
    print(f"wrote {PATH}")
