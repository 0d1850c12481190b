"""Exception types that map onto the exit codes of DESIGN.md."""


class PreflightError(Exception):
    """Base class of every error preflight raises on purpose."""


class InputError(PreflightError, ValueError):
    """Bad input or usage: the CLI prints the message on one line and exits 2."""
