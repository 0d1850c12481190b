"""Every threshold preflight applies, with its documented default.

Precedence: command line > ``--policy FILE.toml`` > ``[tool.preflight]`` in
``./pyproject.toml`` > the defaults below.  Unknown keys are an error naming
the key, so a typo never silently falls back to a default.
"""

from __future__ import annotations

import dataclasses
import math
import os
import sys
from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any

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
COLLIDER_RULES = ("first-separating-set", "conservative", "majority")

PAIR_FLAGS = ("gaussian-noise", "nonlinear", "heteroscedastic", "confounding-suspected", "no-association")
VARIABLE_FLAGS = ("constant", "discrete", "heavy-tailed", "outliers", "autocorrelated", "missing-values", "collinear")
GLOBAL_FLAGS = ("too-few-rows", "too-few-rows-to-orient", "multiple-gaussian-components", "dependent-components",
                "varsortable", "duplicate-rows")
FLAGS: tuple[str, ...] = PAIR_FLAGS + VARIABLE_FLAGS + GLOBAL_FLAGS
"""The flag vocabulary (DESIGN.md): every flag a report can raise, and so every name --fail-on accepts."""

ALPHA_MAX = 0.5
"""Largest significance level accepted: above it a test rejects more often than not under its null."""


def level_rank(level: str) -> int:
    """0 for the strongest rung; larger is weaker."""
    return LEVELS.index(level)


@dataclass(frozen=True)
class Bounds:
    """The values a numeric policy key accepts: finite, within [low, high] (an end may be open or absent)."""

    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    low_why: str = ""
    """Said in the error message when a value is below the range: why the bound is there."""
    high_why: str = ""
    """The same above the range."""

    def problem(self, value: float) -> str | None:
        """Why ``value`` is refused (the ``why`` of the violated end, possibly empty), or None when admitted."""
        if not math.isfinite(value):
            return ""
        if self.low is not None and (value <= self.low if self.low_open else value < self.low):
            return self.low_why
        if self.high is not None and (value >= self.high if self.high_open else value > self.high):
            return self.high_why
        return None

    def text(self) -> str:
        """'from 0 to 10000', 'in (0, 1)', 'of at least 1', 'above 0'."""
        low, high = (None if b is None else f"{b:g}" for b in (self.low, self.high))
        if low is not None and high is not None:
            if self.low_open or self.high_open:
                return f"in {'(' if self.low_open else '['}{low}, {high}{')' if self.high_open else ']'}"
            return f"from {low} to {high}"
        if low is not None:
            return "above " + low if self.low_open else "of at least " + low
        if high is not None:
            return "below " + high if self.high_open else "of at most " + high
        return ""


_WORK = "the upper bound that keeps a run finite: see `preflight policy`"
_SHARE = Bounds(0.0, 1.0)
_THRESHOLD = Bounds(0.0)

BOUNDS: dict[str, Bounds] = {
    "alpha": Bounds(0.0, ALPHA_MAX, low_open=True,
                    high_why="a significance level above it tests nothing a reader would call significant"),
    "min_rows": Bounds(10, low_why="the battery's regressions and tests need at least 8 rows"),
    "min_rows_orientation": Bounds(1),
    "discrete_max_levels": Bounds(1),
    "discrete_min_distinct_share": _SHARE,
    "heavy_tail_excess_kurtosis": _THRESHOLD,
    "outlier_robust_z": Bounds(0.0, low_open=True),
    "autocorrelation_lags": Bounds(1, 500, high_why=_WORK),
    "autocorrelation_min_effect": _SHARE,
    "vif_max": Bounds(1.0, low_why="no variance inflation factor is below 1"),
    "condition_number_max": Bounds(1.0, low_why="no condition number is below 1"),
    "duplicate_rows_max_share": _SHARE,
    "duplicate_rows_continuous_min_distinct_share": _SHARE,
    "shapiro_max_n": Bounds(3, 5000, low_why="the range of Royston's approximation",
                            high_why="the range of Royston's approximation"),
    "nongaussian_min_abs_skew": _THRESHOLD,
    "nongaussian_min_abs_excess_kurtosis": _THRESHOLD,
    "nonlinear_min_r2_gain": _SHARE,
    "spline_max_df": Bounds(4, 30, low_why="a cubic spline needs 4", high_why=_WORK),
    "heteroscedastic_min_r2": _SHARE,
    "confounding_spread_min_r2": _SHARE,
    "dependence_min_hsic": _SHARE,
    "hidden_cause_min_bracket_depth": Bounds(0.0, 0.5, high_why="the depth is at most 0.5, at the bracket's middle"),
    "equation_precedence_min_rows": Bounds(1),
    "hsic_exact_max_n": Bounds(1, 5000, high_why=_WORK),
    "hsic_max_n": Bounds(6, 100_000, low_why="HSIC needs at least 6 rows", high_why=_WORK),
    "hsic_features": Bounds(1, 256, high_why=_WORK),
    "hsic_permutations": Bounds(0, 10_000, high_why=_WORK),
    "varsortable_min_share": _SHARE,
    "ica_stable_min_correlation": Bounds(0.0, 1.0, low_open=True),
    "ica_dependence_min_effect_rows": _THRESHOLD,
    "plot_max_points": Bounds(1, 20_000, high_why=_WORK),
    "jobs": Bounds(0, low_why="0 means every core available"),
}
"""Allowed values of every numeric key (``seed`` aside), checked when a policy is built.

Upper bounds sit on the keys that scale the work; each one's docstring says
what it costs and why no sensible analysis needs more.  ``preflight policy``
lists every range.
"""


@dataclass(frozen=True)
class Policy:
    # --- decisions
    alpha: float = 0.05
    """Significance level of every test, applied to multiplicity-adjusted p-values."""
    correction: str = "holm"
    """Multiplicity correction within each family of tests: ``holm`` or ``fdr_bh``."""
    collider_rule: str = "first-separating-set"
    """How the equivalence class decides whether a - k - b (a, b not adjacent) is a collider.

    ``first-separating-set``: k is a collider when it is not in the separating
    set the PC-stable skeleton search found first (Spirtes, Glymour and Scheines
    2000; Colombo and Maathuis 2014).  Which set is found first depends on the
    order of the columns, and the analysis always sees them sorted by name, so
    the class does not depend on the order you give them in.
    ``conservative`` (Ramsey, Zhang and Spirtes 2006) and ``majority``
    (Colombo and Maathuis 2014) decide from every separating subset and are
    order-independent by construction.  The default is the first set on
    measurement: on the validity study's 32 linear non-Gaussian random DAGs of
    1,000 and 5,000 rows, 11 of 304 edges were oriented wrongly with it, 14
    with ``majority`` and 19 with ``conservative``."""
    seed: int = 20261202
    """Seed of every random choice (subsamples, permutations, random features)."""
    require: str = "linear-non-gaussian"
    """The rung the gate asks for; exit 0 when the conclusion is at or above it."""
    fail_on: tuple[str, ...] = ()
    """Flags that fail the gate whatever the conclusion."""

    # --- data regime
    min_rows: int = 30
    """Below this many usable rows no structural conclusion is drawn (``too-few-rows``).

    At least 10: the battery's regressions and tests need 8 rows, and a
    table below the key's value is reported as ``too-few-rows`` instead of
    failing half-way."""
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
    """Lags of the Ljung-Box test on each column in file order.

    At most 500: more than a year of daily rows, and the cost is n x lags
    per column (500 lags on 10^6 rows took 1.2 s per column); the test
    loses power as lags are added, so nothing is gained above."""
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
    """Repeated rows are judged only when some column has at least this share of distinct values
    among the distinct rows.

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
    """Upper limit of the spline's degrees of freedom (the df grow with n, see fit.spline_df).

    From 4 (a cubic spline) to 30: the df reach 30 only above 17 million
    rows (round(n ** 0.2) + 2), and each fit costs n x df^2."""

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

    dependence_min_hsic: float = 0.002
    """Normalised HSIC at or above which a significant dependence of an equation's residual, or of two
    structural noise estimates, counts.

    Normalised HSIC (Gaussian kernels, median bandwidths) is free of n and
    grows roughly like the squared correlation: Gaussian pairs at 4,000 rows
    give about 0.0005 at r = 0, 0.002 at r = 0.05 and 0.005 at r = 0.1.  So
    0.002 asks for dependence at least as strong as a correlation of about
    0.05; below a few thousand rows the test's own noise is larger than
    that and the floor changes nothing, above it a chance-sized rejection
    can no longer raise ``confounding-suspected``.  A significant
    dependence below the floor still withholds an orientation when it comes
    close to the other direction's (``preflight.equation_stage.FAINT_SHARE``):
    in ten seeded forks at 2,000 rows with the common cause dropped, one was
    oriented on a weaker side of R-squared 0.0029 at adjusted p 0.004.
    A hidden common cause of two variables at 2,000 rows gave 0.002 to 0.008
    in the less dependent direction, and the spread tests
    (``confounding_spread_min_r2``) count as dependence as well."""

    hidden_cause_min_bracket_depth: float = 0.1
    """Depth inside the bracket of a pair's least-squares slopes at or above which a significant
    third-moment slope (:func:`preflight.checks.confounding.third_moment_slope_bracket`) counts as the
    trace of a hidden common cause on a pair judged nonlinear.

    Depth is the distance of Geary's slope from the nearer end of the
    bracket, as a share of its width on a log scale (0 at either end, 0.5
    in the middle).  Two variables that each measure one skewed hidden
    cause with noise put it at 0.3 to 0.7 of the way across (20
    combinations of hidden-cause and noise families at 200,000 rows), a
    straight line puts it at an end, so 0.1 asks for a slope clearly inside
    while keeping the hidden pairs (measurements in the contributor guide)."""

    equation_precedence_min_rows: int = 1000
    """From this many rows an edge judged inside structural equations that hold up takes precedence: its
    orientation is kept against a direction compelled by the class (a caution instead of a contested edge),
    and an edge independent both ways limits only itself (``direction-too-faint``).

    Below it, the residual bootstrap has too little power for either to be
    read as evidence, and a conflict with the class is more often a hidden
    common cause: on the validity study's 200-row hidden-confounder tables,
    8 of 96 reached ``linear-non-gaussian`` through these two rules without
    the threshold; on its several-parents tables at 1,000 and 2,000 rows
    they lifted the correct rung from 0 of 16 to 12 of 16."""

    # --- independence
    hsic_exact_max_n: int = 2000
    """Up to this n HSIC is exact (O(n^2)); above, random Fourier features (linear time).

    At most 5,000: one exact test on 5,000 rows holds 200 MB Gram matrices
    (about 0.6 GB at its peak) and took 3.2 s on one core, and every pair
    runs several; above a few thousand rows the random-feature test already
    has more power than the exact one on 2,000 (see ``hsic_features``)."""
    hsic_max_n: int = 20000
    """Above this n HSIC runs on a seeded subsample of this many rows.

    At most 100,000 (five times the default): the random features of every
    column are held at once, n x 2 x ``hsic_features`` values each (64 MB per
    column at 100,000 rows and 40 frequencies), and at 20,000 rows the test
    already finds the weak dependence of the benchmark in 165 to 181 of 200
    draws."""
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
    ``benchmarks/RESULTS.md``.  At most 256, twice the largest setting
    measured, which found at most 6 more of 200 than 64: 256 frequencies
    cost 41 times the products of 40."""
    hsic_permutations: int = 0
    """0 uses the gamma approximation; a positive number runs a seeded permutation test.

    At most 10,000: the smallest p-value is 1 / (B + 1), and 10,000 resolves
    p-values down to 1e-4, enough for a Holm correction over 500 tests at
    alpha 0.05.  Each permutation repeats the exact test (about 20 ms on
    2,000 rows), so 10,000 already cost minutes per test."""

    # --- structure
    varsortable_min_share: float = 0.9
    """Share of estimated edges along which marginal variance increases that raises ``varsortable``."""
    ica_stable_min_correlation: float = 0.95
    """|correlation| at which a FastICA component of one seeded start counts as found again by another.

    The whole-table ICA screen runs eight seeded starts; unless every
    component of the kept unmixing is found again (up to sign, scale and
    order) in every other start, the components are not identified (too
    little non-Gaussianity) and their dependence is not interpreted, so
    ``dependent-components`` cannot be raised.  Lower accepts less
    reproducible components as identified."""
    ica_dependence_min_effect_rows: float = 30.0
    """Materiality of dependence between ICA components: a normalised HSIC of at least this divided by the rows tested.

    The estimated unmixing is only sqrt(n)-consistent, so even a true linear
    non-Gaussian table leaves its components a small real dependence, which
    HSIC detects on skewed sources: up to about 25 / n in simulations with 3
    to 5 variables and 1,000 to 5,000 rows.  A component pair therefore
    counts as dependent (``dependent-components``) only when its adjusted
    p-value is below ``alpha`` and its normalised HSIC reaches this / m,
    m the rows the test runs on (at most 5,000)."""

    # --- reports and speed
    plot_max_points: int = 2000
    """Plots draw a seeded subsample of at most this many rows.

    At most 20,000: the points are drawn as a raster image, where more than
    that only overplot each other, while drawing time and the samples kept
    for the HTML report grow with their number."""
    jobs: int = 0
    """Worker processes for the pair battery; 0 means the cores available.

    More than the cores available to the process (its CPU affinity) or than
    there are pairs to share out are capped to that number, and the command
    line says so when it caps at the cores: extra processes only add memory
    and switching."""

    def __post_init__(self) -> None:
        if self.collider_rule not in COLLIDER_RULES:
            raise InputError(f"policy collider_rule must be one of {', '.join(COLLIDER_RULES)}, "
                             f"got {self.collider_rule!r}")
        if self.correction not in CORRECTIONS:
            raise InputError(f"policy correction must be one of {', '.join(CORRECTIONS)}, got {self.correction!r}")
        if self.require not in LEVELS:
            raise InputError(f"policy require must be one of {', '.join(LEVELS)}, got {self.require!r}")
        for name, bounds in BOUNDS.items():
            value = getattr(self, name)
            kind = POLICY_KEYS[name]
            whole = isinstance(value, int) and not isinstance(value, bool)
            noun = "a whole number" if kind is int else "a number"
            if not (whole or (kind is float and isinstance(value, float))):
                raise InputError(f"policy {name} must be {noun}, got {value!r}")
            problem = bounds.problem(value)
            if problem is not None:
                noun = noun if math.isfinite(value) else "a finite number"
                why = f" ({problem})" if problem else ""
                raise InputError(f"policy {name} must be {noun} {bounds.text()}{why}, got {value!r}")
        if isinstance(self.seed, bool) or not isinstance(self.seed, int) or self.seed < 0:
            raise InputError(f"policy seed must be a whole number of 0 or more, got {self.seed!r}")
        unknown = [flag for flag in self.fail_on if flag not in FLAGS]
        if unknown:
            raise InputError(f"unknown flag {unknown[0]!r} in fail_on (--fail-on); valid flags: {', '.join(FLAGS)}")

    def to_dict(self) -> dict[str, Any]:
        out = dataclasses.asdict(self)
        out["fail_on"] = list(self.fail_on)
        return out


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
    cls = tree.body[0]
    assert isinstance(cls, ast.ClassDef)
    body = cls.body
    for node, nxt in zip(body, body[1:]):
        if (isinstance(node, ast.AnnAssign) and isinstance(node.target, ast.Name)
                and isinstance(nxt, ast.Expr) and isinstance(nxt.value, ast.Constant)):
            docs[node.target.id] = " ".join(str(nxt.value.value).split())
    default = Policy()
    out = []
    for f in fields(Policy):
        doc = docs.get(f.name, "")
        if f.name in BOUNDS:
            kind = "a whole number" if POLICY_KEYS[f.name] is int else "a number"
            doc = f"{doc} Allowed: {kind} {BOUNDS[f.name].text()}.".strip()
        out.append((f.name, getattr(default, f.name), doc))
    return out


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
        wanted = {int: "a whole number", float: "a number", bool: "true or false", tuple: "a list"}.get(kind, "text")
        raise InputError(f"policy key {key!r} in {source} needs {wanted}, got {value!r}") from None


def _read_toml(path: str) -> dict[str, Any]:
    if sys.version_info >= (3, 11):
        import tomllib
    else:  # Python 3.10
        import tomli as tomllib
    try:
        with open(path, "rb") as handle:
            # "utf-8-sig": a byte order mark, as Windows editors write, is not a TOML error.
            return tomllib.loads(handle.read().decode("utf-8-sig"))
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
    overrides_from: str = "the command line",
) -> tuple[Policy, dict[str, str]]:
    """Merge defaults, ``[tool.preflight]``, a policy file and overrides.

    Returns the policy and, for each key that differs from the default, where
    its value came from.  ``overrides_from`` names the overrides' source in
    error messages.
    """
    values: dict[str, Any] = {}
    origin: dict[str, str] = {}
    pyproject = os.path.join(project_dir or os.getcwd(), "pyproject.toml")
    if os.path.isfile(pyproject):
        tool = _read_toml(pyproject).get("tool", {})
        # A "tool" that is not a table holds no [tool.preflight]: the project's file is not ours to judge.
        table = tool.get("preflight", {}) if isinstance(tool, dict) else {}
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
        values[key] = _coerce(key, value, overrides_from)
        origin[key] = "command line"
    return Policy(**values), origin
