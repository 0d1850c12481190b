"""Every threshold preflight applies, with its documented default.

Precedence: command line > ``--policy FILE.toml`` > ``[tool.preflight]`` in
``./pyproject.toml`` > the defaults below.  Unknown keys are an error naming
the key, so a typo never silently falls back to a default.
"""

from __future__ import annotations

import dataclasses
import os
from dataclasses import dataclass, field, fields
from typing import Any, Mapping

from preflight.errors import InputError

LEVELS: tuple[str, ...] = (
    "linear-non-gaussian",
    "additive-noise",
    "equivalence-class",
    "latent-equivalence-class",
    "none",
)
"""The conclusion ladder, strongest first (DESIGN.md)."""

CORRECTIONS = ("holm", "fdr_bh")

PAIR_FLAGS = ("gaussian-noise", "nonlinear", "heteroscedastic", "confounding-suspected", "no-association")
VARIABLE_FLAGS = ("constant", "discrete", "heavy-tailed", "outliers", "autocorrelated", "missing-values", "collinear")
GLOBAL_FLAGS = ("too-few-rows", "too-few-rows-to-orient", "multiple-gaussian-components", "dependent-components",
                "varsortable", "duplicate-rows")
FLAGS: tuple[str, ...] = PAIR_FLAGS + VARIABLE_FLAGS + GLOBAL_FLAGS
"""The flag vocabulary (DESIGN.md): every flag a report can raise, and so every name --fail-on accepts."""

ALPHA_MAX = 0.5
"""Largest significance level accepted: above it a test rejects more often than not under its null."""


SEED_LIMIT = 2**32
"""Random generators (FastICA's among them) take seeds below this."""


def working_seed(seed: int) -> int:
    """The seed the random generators get for a policy seed.

    Seeds below ``SEED_LIMIT`` are used as they are, so their reports never
    change; a larger one is mapped through numpy's SeedSequence to a 32-bit
    seed, so any whole number of 0 or more can be given.
    """
    if seed < SEED_LIMIT:
        return seed
    import numpy as np

    return int(np.random.SeedSequence(seed).generate_state(1)[0])


def level_rank(level: str) -> int:
    """0 for the strongest rung; larger is weaker."""
    return LEVELS.index(level)


@dataclass(frozen=True)
class Policy:
    # --- decisions
    alpha: float = 0.05
    """Significance level of every test, applied to multiplicity-adjusted p-values."""
    correction: str = "holm"
    """Multiplicity correction within each family of tests: ``holm`` or ``fdr_bh``."""
    seed: int = 20261202
    """Seed of every random choice (subsamples, permutations, random features)."""
    require: str = "linear-non-gaussian"
    """The rung the gate asks for; exit 0 when the conclusion is at or above it."""
    fail_on: tuple[str, ...] = ()
    """Flags that fail the gate whatever the conclusion."""

    # --- data regime
    min_rows: int = 30
    """Below this many usable rows no structural conclusion is drawn (``too-few-rows``)."""
    min_rows_orientation: int = 200
    """Below this many rows no rung that orients edges from noise shape is licensed."""
    discrete_max_levels: int = 20
    """A column with at most this many distinct values is ``discrete``."""
    discrete_min_distinct_share: float = 0.01
    """A column whose distinct values are fewer than this share of rows is ``discrete``."""
    heavy_tail_excess_kurtosis: float = 10.0
    """Sample excess kurtosis above which a column is ``heavy-tailed``."""
    outlier_robust_z: float = 7.0
    """|x - median| / (1.4826 MAD) above which a value counts as an outlier."""
    autocorrelation_lags: int = 10
    """Lags of the Ljung-Box test on each column in file order."""
    autocorrelation_min_effect: float = 0.1
    """Largest |autocorrelation| over those lags that makes a significant result material."""
    rows_unordered: bool = False
    """Row order carries no meaning: skip the autocorrelation screen."""
    vif_max: float = 10.0
    """Variance inflation factor above which a column is ``collinear``."""
    condition_number_max: float = 30.0
    """Condition number of the standardised design above which the table is collinear."""
    duplicate_rows_max_share: float = 0.01
    """Share of rows repeating an earlier row exactly above which ``duplicate-rows`` is raised.

    Copied rows break the i.i.d. assumption and every test counts them as
    fresh evidence.  Below 1 % they move an n-scaled statistic by under 1 %,
    so they are reported in the duplicated-rows check but not flagged; set 0
    to flag any repeat.
    """
    duplicate_rows_continuous_min_distinct_share: float = 0.5
    """Repeated rows are judged only when some column has at least this share of distinct values among the distinct rows.

    A column drawn from a continuous distribution has (almost) only distinct
    values, so whole-row repeats are copies; in coarse data (counts, a few
    levels) rows coincide by chance.  Half sits far from both: rounded
    continuous measurements keep most values distinct, counts keep few.
    """

    # --- normality (noise shape)
    shapiro_max_n: int = 5000
    """Shapiro-Wilk runs on a seeded subsample of at most this many values."""
    nongaussian_min_abs_skew: float = 0.1
    """|skewness| at or above which a significant departure from normality is material."""
    nongaussian_min_abs_excess_kurtosis: float = 0.2
    """|excess kurtosis| at or above which a significant departure from normality is material."""

    # --- linearity
    nonlinear_min_r2_gain: float = 0.01
    """Gain in explained variance (spline or RESET over linear) that makes nonlinearity material."""
    spline_max_df: int = 10
    """Upper limit of the spline's degrees of freedom (the df grow with n, see fit.spline_df)."""

    # --- variance
    heteroscedastic_min_r2: float = 0.01
    """R-squared of the auxiliary regression that makes heteroscedasticity material."""
    confounding_spread_min_r2: float = 0.005
    """Auxiliary R-squared at which a significant change of residual spread counts as residual dependence
    in the confounding signal (both directions dependent).

    Lower than ``heteroscedastic_min_r2``: a hidden common cause of two
    sub-Gaussian variables leaves only a faint spread change in the less
    dependent direction (Breusch-Pagan/White auxiliary R-squared 0.005 to
    0.017 in ten seeded forks at 2,000 rows with the cause dropped), while
    in seeded linear non-Gaussian chains a chance rejection in the causal
    direction reached 0.0044.  The margin is narrow at 2,000 rows; it widens
    with n, since a real spread change keeps its R-squared while a chance
    one shrinks like 1/n."""

    # --- independence
    hsic_exact_max_n: int = 2000
    """Up to this n HSIC is exact (O(n^2)); above, random Fourier features (linear time)."""
    hsic_max_n: int = 20000
    """Above this n HSIC runs on a seeded subsample of this many rows."""
    hsic_features: int = 40
    """Random frequencies per variable in the large-scale HSIC (each gives a cosine and a sine feature).

    Cost grows with its square.  ``python benchmarks/hsic_features.py``
    (200 seeded draws per case, weak reverse-regression dependence) counts
    rejections at 128 / 64 / 40 / 32 frequencies of 101 / 96 / 100 / 96,
    105 / 99 / 103 / 88 and 142 / 141 / 137 / 132 at 3,000 rows, and
    181 / 181 / 172 / 174 and 165 / 162 / 152 / 153 at 20,000 rows, where
    every one of them is far above the exact test on 2,000 rows (29 and
    16); false alarms on independent pairs stayed at 6 to 14 of 200 draws
    for every setting.  40 keeps the power at a few thousand rows and loses
    about 5 points at 20,000; a check of 10 variables and 5,000 rows took
    0.58 s against 0.78 s with 64 (median of 7 runs, 2 cores).  Table in
    ``benchmarks/RESULTS.md``."""
    hsic_permutations: int = 0
    """0 uses the gamma approximation; a positive number runs a seeded permutation test."""

    # --- structure
    varsortable_min_share: float = 0.9
    """Share of estimated edges along which marginal variance increases that raises ``varsortable``."""

    # --- reports and speed
    plot_max_points: int = 2000
    """Plots draw a seeded subsample of at most this many rows."""
    jobs: int = 0
    """Worker processes for the pair battery; 0 means the cores available."""

    def __post_init__(self) -> None:
        if not 0.0 < self.alpha <= ALPHA_MAX:
            raise InputError(f"policy alpha (the significance level) must lie in (0, {ALPHA_MAX}], got {self.alpha}")
        if isinstance(self.seed, bool) or not isinstance(self.seed, int) or self.seed < 0:
            raise InputError(f"policy seed must be a whole number of 0 or more, got {self.seed!r}")
        unknown = [flag for flag in self.fail_on if flag not in FLAGS]
        if unknown:
            raise InputError(f"unknown flag {unknown[0]!r} in fail_on (--fail-on); valid flags: {', '.join(FLAGS)}")
        if self.correction not in CORRECTIONS:
            raise InputError(f"policy correction must be one of {', '.join(CORRECTIONS)}, got {self.correction!r}")
        if self.require not in LEVELS:
            raise InputError(f"policy require must be one of {', '.join(LEVELS)}, got {self.require!r}")
        for name in ("min_rows", "min_rows_orientation", "discrete_max_levels", "autocorrelation_lags",
                     "shapiro_max_n", "spline_max_df", "hsic_exact_max_n", "hsic_max_n", "hsic_features",
                     "plot_max_points"):
            if getattr(self, name) < 1:
                raise InputError(f"policy {name} must be a positive whole number, got {getattr(self, name)}")
        if self.hsic_permutations < 0 or self.jobs < 0:
            raise InputError("policy hsic_permutations and jobs must not be negative")
        if self.spline_max_df < 4:
            raise InputError("policy spline_max_df must be at least 4")
        if self.shapiro_max_n < 3 or self.shapiro_max_n > 5000:
            raise InputError("policy shapiro_max_n must lie between 3 and 5000 (the range of Royston's approximation)")
        for name in ("discrete_min_distinct_share", "varsortable_min_share", "duplicate_rows_max_share",
                     "confounding_spread_min_r2",
                     "duplicate_rows_continuous_min_distinct_share"):
            _check_range(name, getattr(self, name), 0.0, 1.0)

    def to_dict(self) -> dict[str, Any]:
        out = dataclasses.asdict(self)
        out["fail_on"] = list(self.fail_on)
        return out


def _check_range(name: str, value: float, low: float, high: float, open_ends: bool = False) -> None:
    ok = (low < value < high) if open_ends else (low <= value <= high)
    if not ok:
        raise InputError(f"policy {name} must lie in {'(' if open_ends else '['}{low}, {high}{')' if open_ends else ']'}, got {value}")


POLICY_KEYS: dict[str, type] = {}
for _f in fields(Policy):
    POLICY_KEYS[_f.name] = type(Policy.__dataclass_fields__[_f.name].default)


def describe_policy() -> list[tuple[str, Any, str]]:
    """(key, default, one-line description) for every policy key, read from the docstrings above."""
    import ast
    import inspect

    source = inspect.getsource(Policy)
    tree = ast.parse(source)
    docs: dict[str, str] = {}
    body = tree.body[0].body
    for node, nxt in zip(body, body[1:]):
        if isinstance(node, ast.AnnAssign) and isinstance(nxt, ast.Expr) and isinstance(nxt.value, ast.Constant):
            docs[node.target.id] = " ".join(str(nxt.value.value).split())
    default = Policy()
    return [(f.name, getattr(default, f.name), docs.get(f.name, "")) for f in fields(Policy)]


def _coerce(key: str, value: Any, source: str) -> Any:
    if key not in POLICY_KEYS:
        raise InputError(f"unknown policy key {key!r} in {source}")
    kind = POLICY_KEYS[key]
    try:
        if kind is bool:
            if isinstance(value, str):
                lowered = value.strip().lower()
                if lowered in ("true", "yes", "1", "on"):
                    return True
                if lowered in ("false", "no", "0", "off"):
                    return False
                raise ValueError(value)
            if isinstance(value, bool):
                return value
            raise ValueError(value)
        if kind is tuple:
            if isinstance(value, str):
                return tuple(v.strip() for v in value.split(",") if v.strip())
            return tuple(str(v) for v in value)
        if kind is int:
            if isinstance(value, bool) or (isinstance(value, float) and not value.is_integer()):
                raise ValueError(value)
            return int(value)
        if kind is float:
            if isinstance(value, bool):
                raise ValueError(value)
            return float(value)
        return str(value)
    except (TypeError, ValueError):
        raise InputError(f"policy key {key!r} in {source} needs a {kind.__name__}, got {value!r}") from None


def _read_toml(path: str) -> dict[str, Any]:
    try:
        import tomllib
    except ModuleNotFoundError:  # Python 3.10
        import tomli as tomllib  # type: ignore[no-redef]
    try:
        with open(path, "rb") as handle:
            return tomllib.load(handle)
    except FileNotFoundError:
        raise InputError(f"policy file not found: {path}") from None
    except OSError as exc:
        raise InputError(f"cannot read policy file {path}: {exc.strerror}") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"policy file {path} is not valid TOML: {exc}") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"policy file {path} is not UTF-8 text (undecodable byte at offset {exc.start})") from None


def build_policy(
    overrides: Mapping[str, Any] | None = None,
    policy_file: str | None = None,
    project_dir: str | None = None,
) -> tuple[Policy, dict[str, str]]:
    """Merge defaults, ``[tool.preflight]``, a policy file and overrides.

    Returns the policy and, for each key that differs from the default, where
    its value came from.
    """
    values: dict[str, Any] = {}
    origin: dict[str, str] = {}
    pyproject = os.path.join(project_dir or os.getcwd(), "pyproject.toml")
    if os.path.isfile(pyproject):
        table = _read_toml(pyproject).get("tool", {}).get("preflight", {})
        if not isinstance(table, dict):
            raise InputError(f"[tool.preflight] in {pyproject} must be a table")
        for key, value in table.items():
            values[key] = _coerce(key, value, f"[tool.preflight] of {pyproject}")
            origin[key] = pyproject
    if policy_file is not None:
        table = _read_toml(policy_file)
        if isinstance(table.get("tool"), dict) and "preflight" in table["tool"]:
            table = table["tool"]["preflight"]
        if not isinstance(table, dict):
            raise InputError(f"[tool.preflight] in policy file {policy_file} must be a table")
        for key, value in table.items():
            values[key] = _coerce(key, value, policy_file)
            origin[key] = policy_file
    for key, value in (overrides or {}).items():
        if value is None:
            continue
        values[key] = _coerce(key, value, "the command line")
        origin[key] = "command line"
    return Policy(**values), origin
