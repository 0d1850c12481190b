"""Statistical checks: pure functions on arrays returning ``CheckResult``.

One module per family.  Every function validates its input through
:mod:`preflight.checks._validate`, never mutates its arguments, and takes an
explicit ``seed`` wherever it draws random numbers.
"""
