"""Multiplicity corrections against statsmodels, the general-purpose reference.

Source: ``statsmodels.stats.multitest.multipletests`` (methods ``holm`` and
``fdr_bh``); Holm (1979) and Benjamini and Hochberg (1995) define them.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.multitest import multipletests

from preflight.evidence import adjust_p_values

P_VALUES = st.lists(st.one_of(st.floats(0.0, 1.0), st.sampled_from([0.0, 0.01, 0.05, 1.0])), min_size=1, max_size=60)


@pytest.mark.parametrize("method", ["holm", "fdr_bh"])
@settings(max_examples=40, deadline=None)
@given(p=P_VALUES)
def test_adjusted_p_values_match_statsmodels_multipletests(method, p):
    expected = multipletests(np.array(p), method=method)[1]
    np.testing.assert_allclose(adjust_p_values(p, method), expected, rtol=1e-12, atol=1e-15)


def test_benjamini_hochberg_1995_worked_example():
    # The fifteen p-values of Benjamini and Hochberg (1995, section 3.2): at q = 0.05
    # the step-up procedure rejects the four smallest (values written from memory of
    # that example; the count is re-derived here by hand: p_(4) = 0.0095 <= 4/15 * 0.05,
    # p_(5) = 0.0201 > 5/15 * 0.05 and no larger rank qualifies).
    p = [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459,
         0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.0000]
    assert int((adjust_p_values(p, "fdr_bh") < 0.05).sum()) == 4
    # Holm at 0.05 rejects p_(i) while p_(i) <= 0.05 / (16 - i): the first three.
    assert int((adjust_p_values(p, "holm") < 0.05).sum()) == 3


def test_unknown_method_is_refused():
    with pytest.raises(ValueError):
        adjust_p_values([0.1], "bonferroni-ish")
