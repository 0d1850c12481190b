"""preflight: decide whether causal directions are identifiable before causal discovery.

>>> import preflight
>>> report = preflight.check("firings.csv", seed=1)   # doctest: +SKIP
>>> report.level, report.passed                        # doctest: +SKIP

Heavy modules are imported on first use so that ``preflight --help`` starts fast.
"""

from preflight._version import __version__

__all__ = ["__version__", "check", "compare_reports", "Report", "CheckResult", "CheckIdentity", "Policy", "InputError",
           "LEVELS"]


def __getattr__(name):
    if name == "check":
        from preflight.api import check

        return check
    if name == "compare_reports":
        from preflight.report.compare import compare_reports

        return compare_reports
    if name == "Report":
        from preflight.report.model import Report

        return Report
    if name in ("CheckResult", "CheckIdentity"):
        from preflight import results

        return getattr(results, name)
    if name in ("Policy", "LEVELS"):
        from preflight import policy

        return getattr(policy, name)
    if name == "InputError":
        from preflight.errors import InputError

        return InputError
    raise AttributeError(f"module 'preflight' has no attribute {name!r}")
