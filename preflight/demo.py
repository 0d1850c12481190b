"""An invented demo: the firing record of a ceramics kiln.

Nothing here describes a real plant.  The generator is part of the package so
the tests can check preflight against a structure that is known exactly.

True structure (``TRUE_EDGES``), with noise shapes:

- ``gas_flow`` (uniform) -> ``flame_temp`` (uniform noise): linear, non-Gaussian
- ``flame_temp`` -> ``wall_temp`` (Laplace noise): linear, non-Gaussian
- ``wall_temp`` -> ``glaze_gloss`` (Gaussian noise): nonlinear, a saturating tanh curve
- ``draft_pressure`` (Gaussian) -> ``vent_speed`` (Gaussian noise): linear, Gaussian,
  so only the equivalence class is identifiable for this edge
- a hidden ``clay_moisture`` (not in the file) drives ``shrinkage`` and ``cooling_time``
  (both with uniform noise): a hidden common cause

The honest conclusion for this table is ``latent-equivalence-class``: the
hidden common cause rules out every rung that assumes causal sufficiency.
"""

from __future__ import annotations

import numpy as np

COLUMNS = ("gas_flow", "flame_temp", "wall_temp", "glaze_gloss", "draft_pressure", "vent_speed",
           "shrinkage", "cooling_time")

TRUE_EDGES = (
    ("gas_flow", "flame_temp"),
    ("flame_temp", "wall_temp"),
    ("wall_temp", "glaze_gloss"),
    ("draft_pressure", "vent_speed"),
)
HIDDEN_COMMON_CAUSES = (("clay_moisture", ("shrinkage", "cooling_time")),)
EXPECTED_LEVEL = "latent-equivalence-class"


def _uniform(rng: np.random.Generator, n: int) -> np.ndarray:
    """Uniform with unit variance."""
    return rng.uniform(-np.sqrt(3.0), np.sqrt(3.0), n)


def kiln_data(n: int = 2000, seed: int = 7) -> dict[str, np.ndarray]:
    """Simulate ``n`` firings; returns column name -> values in physical-looking units."""
    rng = np.random.default_rng(seed)
    gas = _uniform(rng, n)
    flame = 0.9 * gas + 0.6 * _uniform(rng, n)
    wall = 0.8 * flame + 0.5 * rng.laplace(0.0, 1.0 / np.sqrt(2.0), n)
    gloss = np.tanh(1.5 * wall / wall.std()) + 0.25 * rng.normal(size=n)
    draft = rng.normal(size=n)
    vent = 0.7 * draft + 0.7 * rng.normal(size=n)
    moisture = _uniform(rng, n)
    shrink = 0.8 * moisture + 0.6 * _uniform(rng, n)
    cooling = 0.7 * moisture + 0.6 * _uniform(rng, n)
    return {
        "gas_flow": 12.0 + 1.5 * gas,          # m3/h
        "flame_temp": 1180.0 + 25.0 * flame,   # deg C
        "wall_temp": 640.0 + 18.0 * wall,      # deg C
        "glaze_gloss": 70.0 + 8.0 * gloss,     # gloss units
        "draft_pressure": -12.0 + 1.1 * draft,  # Pa
        "vent_speed": 3.2 + 0.4 * vent,        # m/s
        "shrinkage": 6.5 + 0.3 * shrink,       # percent
        "cooling_time": 14.0 + 1.2 * cooling,  # hours
    }


def write_demo_csv(path: str, n: int = 2000, seed: int = 7) -> str:
    data = kiln_data(n=n, seed=seed)
    with open(path, "w", encoding="utf-8", newline="") as handle:
        handle.write(",".join(COLUMNS) + "\n")
        block = np.column_stack([data[c] for c in COLUMNS])
        for row in block:
            handle.write(",".join(f"{v:.6f}" for v in row) + "\n")
    return path
