"""The prose both the Markdown and the HTML report write, defined once.

Section titles, how a check's outcome reads, number formatting, the
sentences of the conclusion and the gate, what each finding means, the
methods paragraph with its references: the two renderers take all of it
from here and only add their own markup, so they never disagree on
wording.  Which methods a report cites is read from each check's identity
fields (:mod:`preflight.report.identity`), never from its display name.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from preflight.report.identity import checks_with_identity, variable_check
from preflight.report.text import FLAG_MEANING, LEVEL_WORDS, WHAT_STILL_FITS
from preflight.results import GIVEN_A_SPLINE, SPLINE_EQUATION, SPLINE_RESIDUAL, STRUCTURAL_EQUATION, CheckIdentity

CHECK_HEADER = ("check", "statistic", "p", "adjusted p", "effect", "n", "result", "note")
"""Columns of every table of checks."""
NO_REASON = "No reason was recorded."
FINDINGS_LEAD = "What each finding means, and what analysis still fits"
NO_CHECKS = "No checks."
INPUT_WARNING = "Input warning"
WHOLE_TABLE_FLAGS = "Whole-table flags"
ROWS_NEEDED_HEADER = "rows needed to tell noise from Gaussian"
CHECKS_LEAD = ("Every check, with its raw and multiplicity-adjusted p-value. A result of `evidence` marks a check "
               "that informs the verdict without guarding an assumption on its own.")

# ---------------------------------------------------------------- shared wording

SECTION_TITLES = {
    "conclusion": "Conclusion",
    "why": "Why",
    "cautions": "Cautions",
    "pairs": "Pairs and edges",
    "variables": "Variables",
    "global": "Whole-table checks",
    "methods": "Methods",
    "settings": "Settings in force",
    "input": "Input",
    "checks": "All checks",
    "references": "References",
}

OUTCOME_WORDS = {True: "PASS", False: "FAIL", None: "evidence"}
"""How a check's ``passed`` reads: ``None`` marks evidence, not a guard."""


def report_title(data: dict[str, Any]) -> str:
    return f"Identifiability check of {data['input'].get('path') or 'table'}"


def outcome(passed: bool | None) -> str:
    return OUTCOME_WORDS[passed]


def fmt_number(value: float | int | None, digits: int = 4) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if not isinstance(value, (int, float)):
        return str(value)  # a hand-edited report: shown as it is, escaped by the caller
    if isinstance(value, int):
        return str(value)
    if not math.isfinite(value):
        return "-"
    if value == 0:
        return "0"
    if abs(value) >= 1e6 or abs(value) < 1e-3:
        return f"{value:.{digits - 1}e}"
    return f"{value:.{digits}g}"


def fmt_p(value: float | None) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return str(value)
    if value == 0:
        return "0"
    if value < 1e-4:
        return f"{value:.2e}"
    return f"{value:.4f}"


def fmt_count(value: Any) -> str:
    """A whole number with thousands separators; anything else as it is (escaped by the caller)."""
    return f"{value:,}" if isinstance(value, int) and not isinstance(value, bool) else str(value)


def fmt_setting(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (list, tuple)):
        return ", ".join(str(v) for v in value) if value else "(none)"
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def edge_text(pair: dict[str, Any], arrow: str = "->", line: str = "--") -> str:
    if pair["orientation"] == "x->y":
        return f"{pair['x']} {arrow} {pair['y']}"
    if pair["orientation"] == "y->x":
        return f"{pair['y']} {arrow} {pair['x']}"
    return f"{pair['x']} {line} {pair['y']}"


def pairs_in_reading_order(pairs: Sequence[dict[str, Any]]) -> list[dict[str, Any]]:
    """Adjacent pairs first (they are the edges), each group in the report's column order."""
    return [p for p in pairs if p["adjacent"]] + [p for p in pairs if not p["adjacent"]]


def every_flag(report: dict[str, Any]) -> list[str]:
    seen: list[str] = list(report["global"]["flags"])
    for variable in report["variables"]:
        seen += variable["flags"]
    for pair in report["pairs"]:
        seen += pair["flags"]
    return list(dict.fromkeys(seen))


def findings_explained(report: dict[str, Any]) -> list[tuple[str, str, str | None]]:
    """(flag, what it means, what analysis still fits) for every flag raised anywhere."""
    return [(flag, FLAG_MEANING.get(flag, flag), WHAT_STILL_FITS.get(flag)) for flag in every_flag(report)]


def gate_outcome(conclusion: dict[str, Any]) -> str:
    """Whether the required level was met and what the gate did, as a clause."""
    from preflight.policy import LEVELS

    level, required = conclusion["level"], conclusion["required"]
    met = level in LEVELS and required in LEVELS and LEVELS.index(level) <= LEVELS.index(required)
    if conclusion["passed"]:
        return "met, so the gate passes (exit code 0)"
    if met:
        return "met, but a --fail-on flag was raised, so the gate fails (exit code 1)"
    return "not met, so the gate fails (exit code 1)"


def gate_sentence(conclusion: dict[str, Any]) -> str:
    status = "PASS" if conclusion["passed"] else "FAIL"
    return f"{status}: the required level {conclusion['required']} is {gate_outcome(conclusion)}."


def noise_finding(report: dict[str, Any], name: str) -> str:
    structure = report.get("structure") or {}
    if not structure.get("order"):
        return "not estimated"
    if name in (structure.get("gaussian_noises") or []):
        return "Gaussian-looking"
    return "non-Gaussian"


def rows_needed_text(variable: dict[str, Any]) -> str:
    check = variable_check(variable, "rows-needed")
    if check is None:
        return "-"
    if check["statistic"] is None:
        return "no finite number"
    return f"{int(math.ceil(check['statistic'])):,}"


def policy_descriptions() -> dict[str, str]:
    try:
        from preflight.policy import describe_policy

        return {key: doc.replace("``", "") for key, _, doc in describe_policy()}
    except Exception:  # descriptions are a courtesy; a report renders without them
        return {}


def conclusion_words(level: str) -> str:
    return LEVEL_WORDS.get(level, level)


# ---------------------------------------------------------------- methods catalogue
#
# Full references are written from memory and checked against the author
# and year the project's issue names for each method.

REFERENCES = {
    "anderson1952": "Anderson, T. W. and Darling, D. A. (1952). Asymptotic theory of certain \"goodness of fit\" "
                    "criteria based on stochastic processes. Annals of Mathematical Statistics 23(2), 193-212.",
    "belsley1980": "Belsley, D. A., Kuh, E. and Welsch, R. E. (1980). Regression Diagnostics: Identifying "
                   "Influential Data and Sources of Collinearity. Wiley.",
    "benjamini1995": "Benjamini, Y. and Hochberg, Y. (1995). Controlling the false discovery rate: a practical and "
                     "powerful approach to multiple testing. Journal of the Royal Statistical Society B 57(1), "
                     "289-300.",
    "breusch1979": "Breusch, T. S. and Pagan, A. R. (1979). A simple test for heteroscedasticity and random "
                   "coefficient variation. Econometrica 47(5), 1287-1294.",
    "buhlmann2014": "Buehlmann, P., Peters, J. and Ernest, J. (2014). CAM: Causal additive models, "
                    "high-dimensional order search and penalized regression. Annals of Statistics 42: 2526-2556.",
    "colombo2014": "Colombo, D. and Maathuis, M. H. (2014). Order-independent constraint-based causal structure "
                   "learning. Journal of Machine Learning Research 15, 3741-3782.",
    "dagostino1973": "D'Agostino, R. and Pearson, E. S. (1973). Tests for departure from normality. Empirical "
                     "results for the distributions of b2 and sqrt(b1). Biometrika 60(3), 613-622.",
    "deboor1978": "de Boor, C. (1978). A Practical Guide to Splines. Springer.",
    "fisher1921": "Fisher, R. A. (1921). On the \"probable error\" of a coefficient of correlation deduced from a "
                  "small sample. Metron 1, 3-32.",
    "gretton2005": "Gretton, A., Bousquet, O., Smola, A. and Schoelkopf, B. (2005). Measuring statistical "
                   "dependence with Hilbert-Schmidt norms. Algorithmic Learning Theory (ALT), 63-77.",
    "gretton2008": "Gretton, A., Fukumizu, K., Teo, C. H., Song, L., Schoelkopf, B. and Smola, A. J. (2008). A kernel "
                   "statistical test of independence. Advances in Neural Information Processing Systems 20.",
    "henze1990": "Henze, N. and Zirkler, B. (1990). A class of invariant consistent tests for multivariate "
                 "normality. Communications in Statistics - Theory and Methods 19(10), 3595-3617.",
    "holm1979": "Holm, S. (1979). A simple sequentially rejective multiple test procedure. Scandinavian Journal "
                "of Statistics 6(2), 65-70.",
    "geary1942": "Geary, R. C. (1942). Inherent relations between random variables. Proceedings of the Royal "
                 "Irish Academy, Section A 47, 63-76.",
    "reiersol1950": "Reiers\u00f8l, O. (1950). Identifiability of a linear relation between variables which are "
                    "subject to error. Econometrica 18(4), 375-389.",
    "frisch1934": "Frisch, R. (1934). Statistical Confluence Analysis by Means of Complete Regression Systems. "
                  "Oslo: University Institute of Economics.",
    "hoyer2008": "Hoyer, P. O., Shimizu, S., Kerminen, A. J. and Palviainen, M. (2008). Estimation of causal "
                 "effects using linear non-Gaussian causal models with hidden variables. International Journal of "
                 "Approximate Reasoning 49(2), 362-378.",
    "cai2023": "Cai, R., Huang, Z., Chen, W., Hao, Z. and Zhang, K. (2023). Causal discovery with latent "
               "confounders based on higher-order cumulants. Proceedings of the 40th International Conference on "
               "Machine Learning, PMLR 202.",
    "poczos2012": "P\u00f3czos, B., Ghahramani, Z. and Schneider, J. (2012). Copula-based kernel dependency "
                  "measures. Proceedings of the 29th International Conference on Machine Learning.",
    "berger1982": "Berger, R. L. (1982). Multiparameter hypothesis testing and acceptance sampling. "
                  "Technometrics 24(4), 295-300.",
    "hoyer2009": "Hoyer, P. O., Janzing, D., Mooij, J. M., Peters, J. and Schoelkopf, B. (2009). Nonlinear causal "
                 "discovery with additive noise models. Advances in Neural Information Processing Systems 21.",
    "hyvarinen1998": "Hyv\u00e4rinen, A. (1998). New approximations of differential entropy for independent component "
                     "analysis and projection pursuit. Advances in Neural Information Processing Systems 10.",
    "hyvarinen1999": "Hyv\u00e4rinen, A. (1999). Fast and robust fixed-point algorithms for independent component "
                     "analysis. IEEE Transactions on Neural Networks 10(3), 626-634.",
    "janzing2018": "Janzing, D. and Schoelkopf, B. (2018). Detecting non-causal artifacts in multivariate linear "
                   "regression models. Proceedings of the 35th International Conference on Machine Learning, "
                   "PMLR 80, 2245-2253.",
    "hyvarinen2013": "Hyv\u00e4rinen, A. and Smith, S. M. (2013). Pairwise likelihood ratios for estimation of "
                     "non-Gaussian structural equation models. Journal of Machine Learning Research 14, 111-152.",
    "jarque1980": "Jarque, C. M. and Bera, A. K. (1980). Efficient tests for normality, homoscedasticity and serial "
                  "independence of regression residuals. Economics Letters 6(3), 255-259.",
    "koenker1981": "Koenker, R. (1981). A note on studentizing a test for heteroscedasticity. Journal of "
                   "Econometrics 17(1), 107-112.",
    "ljung1978": "Ljung, G. M. and Box, G. E. P. (1978). On a measure of lack of fit in time series models. "
                 "Biometrika 65(2), 297-303.",
    "meek1995": "Meek, C. (1995). Causal inference and causal explanation with background knowledge. "
                "Proceedings of the 11th Conference on Uncertainty in Artificial Intelligence, 403-410.",
    "peters2014": "Peters, J., Mooij, J. M., Janzing, D. and Schoelkopf, B. (2014). Causal discovery with "
                  "continuous additive noise models. Journal of Machine Learning Research 15, 2009-2053.",
    "rahimi2007": "Rahimi, A. and Recht, B. (2007). Random features for large-scale kernel machines. Advances in "
                  "Neural Information Processing Systems 20.",
    "ramsey1969": "Ramsey, J. B. (1969). Tests for specification errors in classical linear least-squares "
                  "regression analysis. Journal of the Royal Statistical Society B 31(2), 350-371.",
    "reisach2021": "Reisach, A. G., Seiler, C. and Weichwald, S. (2021). Beware of the simulated DAG! Causal "
                   "discovery benchmarks may be easy to game. Advances in Neural Information Processing Systems 34.",
    "royston1995": "Royston, P. (1995). Remark AS R94: a remark on algorithm AS 181: the W-test for normality. "
                   "Applied Statistics 44(4), 547-551.",
    "shapiro1965": "Shapiro, S. S. and Wilk, M. B. (1965). An analysis of variance test for normality (complete "
                   "samples). Biometrika 52(3/4), 591-611.",
    "shimizu2011": "Shimizu, S., Inazumi, T., Sogawa, Y., Hyv\u00e4rinen, A., Kawahara, Y., Washio, T., Hoyer, P. O. "
                   "and Bollen, K. (2011). DirectLiNGAM: a direct method for learning a linear non-Gaussian "
                   "structural equation model. Journal of Machine Learning Research 12, 1225-1248.",
    "spearman1904": "Spearman, C. (1904). The proof and measurement of association between two things. American "
                    "Journal of Psychology 15(1), 72-101.",
    "stephens1974": "Stephens, M. A. (1974). EDF statistics for goodness of fit and some comparisons. Journal of "
                    "the American Statistical Association 69(347), 730-737.",
    "sen2014": "Sen, A. and Sen, B. (2014). Testing independence and goodness-of-fit in linear models. "
               "Biometrika 101(4), 927-942.",
    "szekely2007": "Sz\u00e9kely, G. J., Rizzo, M. L. and Bakirov, N. K. (2007). Measuring and testing dependence by "
                   "correlation of distances. Annals of Statistics 35(6), 2769-2794.",
    "white1980": "White, H. (1980). A heteroskedasticity-consistent covariance matrix estimator and a direct test "
                 "for heteroskedasticity. Econometrica 48(4), 817-838.",
    "zhang2018": "Zhang, Q., Filippi, S., Gretton, A. and Sejdinovic, D. (2018). Large-scale kernel methods for "
                 "independence testing. Statistics and Computing 28(1), 113-130.",
}


@dataclass(frozen=True)
class Method:
    """One published method, which checks used it, and how the methods text names it."""

    key: str
    group: str
    text: str
    """The phrase the methods paragraph uses, with author-year citations in it."""
    references: tuple[str, ...]
    used_by: Callable[[CheckIdentity], bool]
    """Whether a check with this identity used the method."""


def _tests(*tests: str) -> Callable[[CheckIdentity], bool]:
    return lambda identity: identity.test in tests


def _in_equation(identity: CheckIdentity) -> bool:
    return identity.variant == STRUCTURAL_EQUATION and identity.test in ("hsic", "white") and identity.scope == "pair"


def _spline_hsic(identity: CheckIdentity) -> bool:
    return identity.test == "hsic" and identity.variant == SPLINE_RESIDUAL


GROUPS = {
    "screen": "Each column was first screened on its own",
    "normality": "Normality of regression residuals and of the structural noise estimates was assessed with",
    "linearity": "Linearity of each regression was assessed with",
    "variance": "Constant residual variance was assessed with",
    "independence": "Independence (of each regressor and its residual, of the two variables, and of pairs of "
                    "noise estimates) was assessed with",
    "direction": "The direction of each adjacent pair was further weighed with",
    "whole": "The whole table was checked with",
}

METHODS: tuple[Method, ...] = (
    Method("ljung-box", "screen", "the Ljung-Box test of autocorrelation in file order (Ljung and Box 1978)",
           ("ljung1978",), _tests("ljung-box")),
    Method("collinearity", "screen", "variance inflation factors and the condition number of the standardised "
           "design (Belsley et al. 1980)", ("belsley1980",),
           _tests("variance-inflation-factor", "condition-number")),
    Method("shapiro-wilk", "normality", "the Shapiro-Wilk test (Shapiro and Wilk 1965), with p-values from "
           "Royston's approximation (Royston 1995)", ("shapiro1965", "royston1995"), _tests("shapiro-wilk")),
    Method("anderson-darling", "normality", "the Anderson-Darling test (Anderson and Darling 1952), with the "
           "modified statistic and p-value formulas of Stephens (1974)", ("anderson1952", "stephens1974"),
           _tests("anderson-darling")),
    Method("jarque-bera", "normality", "the Jarque-Bera test (Jarque and Bera 1980)", ("jarque1980",),
           _tests("jarque-bera")),
    Method("dagostino-pearson", "normality", "the D'Agostino-Pearson omnibus test (D'Agostino and Pearson 1973)",
           ("dagostino1973",), _tests("dagostino-pearson")),
    Method("negentropy", "normality", "Hyv\u00e4rinen's negentropy approximation as a measure of non-Gaussianity "
           "(Hyv\u00e4rinen 1998)", ("hyvarinen1998",), _tests("negentropy")),
    Method("ramsey-reset", "linearity", "Ramsey's RESET test with squared and cubed fitted values (Ramsey 1969)",
           ("ramsey1969",), _tests("ramsey-reset")),
    Method("spline-f", "linearity", "a nested-model F-test of a cubic regression spline (B-spline basis with "
           "knots at quantiles; de Boor 1978) against the straight line", ("deboor1978",), _tests("spline-f-test")),
    Method("additive-spline-f", "linearity", "a nested-model F-test of each structural equation (a variable on "
           "all its estimated parents) with every parent entered as a cubic regression spline against the linear "
           "equation (de Boor 1978)", ("deboor1978",), _tests("additive-spline-f-test")),
    Method("breusch-pagan", "variance", "the Breusch-Pagan test (Breusch and Pagan 1979) in Koenker's "
           "studentized form (Koenker 1981)", ("breusch1979", "koenker1981"), _tests("breusch-pagan")),
    Method("white", "variance", "White's test (White 1980)", ("white1980",), _tests("white")),
    Method("hsic", "independence", "the Hilbert-Schmidt independence criterion, HSIC, with Gaussian kernels, "
           "median-heuristic bandwidths and the gamma approximation to its null distribution "
           "(Gretton et al. 2005, 2008)", ("gretton2005", "gretton2008"), _tests("hsic", "ica-component-dependence")),
    Method("hsic-rff", "independence", "random Fourier features for HSIC on large samples (Rahimi and Recht 2007; "
           "Zhang et al. 2018)", ("rahimi2007", "zhang2018"),
           lambda identity: identity.test == "hsic" and identity.null == "random features"),
    Method("residual-bootstrap", "independence", "HSIC between the residual of each structural equation and the "
           "partial residual of the parent under test, the other parents of both variables partialled out, with "
           "its null simulated by the residual bootstrap with refitted coefficients (Sen and Sen 2014); the same "
           "bootstrap calibrates White's auxiliary R-squared of the residual's spread (White 1980)",
           ("sen2014", "white1980"), _in_equation),
    Method("spline-equation", "independence", "for each parent of a structural equation judged nonlinear or of "
           "changing spread, the same bootstrap-calibrated HSIC and White's R-squared with every parent entered as "
           "a cubic regression spline, in both directions: an additive-noise model with independent noise in "
           "neither direction is a sign of a hidden common cause (Hoyer et al. 2009; Buehlmann et al. 2014; "
           "Sen and Sen 2014)", ("hoyer2009", "buhlmann2014", "sen2014"),
           lambda identity: identity.variant == SPLINE_EQUATION),
    Method("spline-separation", "independence", "for an edge with a common neighbour in a relation judged "
           "nonlinear, Pearson, Spearman and HSIC between the two variables once both are regressed on a cubic "
           "regression spline of that neighbour (de Boor 1978): a linear partial correlation does not separate "
           "the ends of a chain through a curve", ("deboor1978",),
           lambda identity: identity.variant == GIVEN_A_SPLINE),
    Method("distance-correlation", "independence", "distance correlation (Sz\u00e9kely et al. 2007)",
           ("szekely2007",), _tests("distance-correlation")),
    Method("pearson", "independence", "Pearson's correlation with Fisher's z transform, adjusted for the size "
           "of the conditioning set (Fisher 1921)", ("fisher1921",), _tests("pearson")),
    Method("spearman", "independence", "Spearman's rank correlation (Spearman 1904)", ("spearman1904",),
           _tests("spearman")),
    Method("likelihood-ratio", "direction", "the pairwise likelihood ratio of Hyv\u00e4rinen and Smith (2013)",
           ("hyvarinen2013",), _tests("pairwise-likelihood-ratio")),
    Method("additive-noise", "direction", "an additive-noise check: HSIC between each regressor and the residual "
           "of a regression spline, in both directions (Hoyer et al. 2009; Peters et al. 2014)",
           ("hoyer2009", "peters2014"), _spline_hsic),
    Method("slope-bracket", "direction", "for a pair judged nonlinear, Geary's third-moment slope against the "
           "bracket of its two least-squares slopes: two noisy measures of one skewed hidden cause put it strictly "
           "inside (Geary 1942; Reiers\u00f8l 1950; Frisch 1934), tested as an intersection-union test of the two "
           "moment conditions a straight line would satisfy (Berger 1982)",
           ("geary1942", "reiersol1950", "frisch1934", "berger1982"), _tests("third-moment-slope-bracket")),
    Method("distant-noise", "independence", "for each pair the skeleton left non-adjacent, HSIC between the "
           "ranks of the two noise estimates (P\u00f3czos et al. 2012) on random Fourier features, corrected across "
           "those pairs; where it is "
           "material, the residual of each estimate regressed on the other tested for independence both ways "
           "with the residual bootstrap (Sen and Sen 2014), as an intersection-union test (Berger 1982), and the "
           "estimates' third-order cross-moments: dependence both ways with a skewed common component is a sign "
           "of a hidden common cause (Hoyer et al. 2008; Cai et al. 2023)",
           ("poczos2012", "sen2014", "berger1982", "hoyer2008", "cai2023"),
           lambda identity: identity.family == "non-adjacent noise dependence"),
    Method("henze-zirkler", "whole", "the Henze-Zirkler test of multivariate normality (Henze and Zirkler 1990)",
           ("henze1990",), _tests("henze-zirkler")),
    Method("fastica", "whole", "FastICA unmixing with a count of Gaussian-looking components "
           "(Hyv\u00e4rinen 1999)", ("hyvarinen1999",),
           _tests("gaussian-like-ica-components", "ica-component-dependence")),
    Method("spectral-confounding", "whole", "the spectral confounding strength of each variable's regression "
           "on five or more estimated parents, an indicator read from the eigenvectors of the parents' "
           "correlation matrix (after Janzing and Schoelkopf 2018)", ("janzing2018",),
           _tests("spectral-confounding-strength")),
    Method("varsortability", "whole", "varsortability, the share of estimated edges along which marginal "
           "variance increases (Reisach et al. 2021)", ("reisach2021",), _tests("varsortability")),
)

# Checks that are descriptive counts (no published test to cite).
_DESCRIPTIVE = frozenset(("distinct-values", "usable-rows", "missing-values", "rows-needed", "excess-kurtosis",
                          "robust-z-outliers", "duplicated-rows"))


def base_name(name: str) -> str:
    """A check's name without the target appended in parentheses: 'hsic (y on x)' -> 'hsic'."""
    return re.sub(r"\s*\(.*$", "", name).strip() or name


@dataclass(frozen=True)
class MethodsUsed:
    methods: tuple[Method, ...]
    structural: tuple[tuple[str, tuple[str, ...]], ...]
    """(sentence, reference keys) for the structural procedures the report relied on."""
    descriptive: tuple[str, ...]
    unrecognised: tuple[str, ...]

    @property
    def reference_keys(self) -> list[str]:
        keys: list[str] = []
        for method in self.methods:
            keys += method.references
        for _, refs in self.structural:
            keys += refs
        return sorted(dict.fromkeys(keys), key=lambda k: REFERENCES[k].lower())


def methods_used(report: dict[str, Any]) -> MethodsUsed:
    """The methods whose checks appear in the report, plus the structural procedures it used."""
    present: dict[str, Method] = {}
    descriptive: list[str] = []
    unrecognised: list[str] = []
    for check, identity in checks_with_identity(report):
        hit = False
        for method in METHODS:
            if method.used_by(identity):
                present.setdefault(method.key, method)
                hit = True
        if not hit:
            label = base_name(check["name"])
            if identity.test in _DESCRIPTIVE:
                descriptive.append(label)
            else:
                unrecognised.append(label)
    ordered = tuple(m for m in METHODS if m.key in present)

    structural: list[tuple[str, tuple[str, ...]]] = []
    structure = report.get("structure") or {}
    if structure.get("order"):
        structural.append(("A causal order was estimated with DirectLiNGAM (Shimizu et al. 2011); each variable's "
                           "parents among its predecessors were pruned by significance, and the residuals of those "
                           "regressions serve as the noise estimates.", ("shimizu2011",)))
    adjacency = str(structure.get("adjacency") or "")
    if "pc-stable" in adjacency.lower():
        structural.append(("The skeleton was estimated with the order-independent PC-stable algorithm (Colombo and "
                           "Maathuis 2014) using partial-correlation tests, joined with the pruned parent sets.",
                           ("colombo2014",)))
    elif adjacency.lower().startswith("hypothesised"):
        structural.append((f"The adjacencies were taken from the user's {adjacency}.", ()))
    if structure.get("order") or any(p["adjacent"] for p in report["pairs"]):
        structural.append(("Edges compelled in the Markov equivalence class (CPDAG) were found from the v-structures "
                           "with Meek's orientation rules (Meek 1995).", ("meek1995",)))
    correction = report["settings"]["correction"]
    alpha = report["settings"]["alpha"]
    if correction == "fdr_bh":
        structural.append((f"p-values were adjusted within each family of tests across the whole table with the "
                           f"Benjamini-Hochberg procedure (Benjamini and Hochberg 1995); decisions use adjusted "
                           f"p-values at alpha = {alpha}.", ("benjamini1995",)))
    else:
        structural.append((f"p-values were adjusted within each family of tests across the whole table with Holm's "
                           f"step-down procedure (Holm 1979); decisions use adjusted p-values at alpha = {alpha}.",
                           ("holm1979",)))
    return MethodsUsed(ordered, tuple(structural), tuple(dict.fromkeys(descriptive)),
                       tuple(dict.fromkeys(unrecognised)))


def methods_paragraphs(report: dict[str, Any]) -> list[str]:
    """The methods text as plain paragraphs (no markup), one per group of methods."""
    used = methods_used(report)
    paragraphs: list[str] = []
    rows = report["input"]["rows_used"]
    paragraphs.append(
        f"The analysis used {rows:,} complete rows of {len(report['input']['columns'])} columns. For every pair "
        "of columns, both variables were first residualised on the pair's conditioning set (the union of their "
        "estimated parents), then each was regressed on the other; the residual of each direction was tested for "
        "normality, linearity, constant variance and independence of its regressor. Under a linear model with "
        "non-Gaussian noise only the causal direction leaves an independent residual; with Gaussian noise both "
        "directions do and only the equivalence class is identifiable.")
    nulls = {identity.null for _, identity in checks_with_identity(report) if identity.test == "hsic"}
    permuted = "permutation" in nulls
    gamma = "gamma" in nulls
    for group, intro in GROUPS.items():
        members = [m.text for m in used.methods if m.group == group]
        if permuted:
            null = ("the gamma approximation to its null distribution or, where a check's note says so, a seeded "
                    "permutation test" if gamma else "a seeded permutation test")
            members = [t.replace("the gamma approximation to its null distribution", null) for t in members]
        if not members:
            continue
        listed = members[0] if len(members) == 1 else "; ".join(members[:-1]) + "; and " + members[-1]
        lead = intro + (": " if group == "screen" else " ")
        paragraphs.append(f"{lead}{listed}.")
    paragraphs.append(" ".join(sentence for sentence, _ in used.structural))
    if used.descriptive:
        paragraphs.append("Descriptive counts reported alongside (no test): " + ", ".join(used.descriptive) + ".")
    if used.unrecognised:
        paragraphs.append("Other checks in this report: " + ", ".join(used.unrecognised) + ".")
    return paragraphs
