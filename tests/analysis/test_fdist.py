"""F-distribution survival function against scipy.special (the reference library)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special  # reference implementation: fdtrc and betainc

from analysis.fdist import f_survival, regularized_incomplete_beta

DFN = (1, 2, 3, 5, 10, 30, 120)
DFD = (1, 2, 5, 12, 50, 160, 320, 1000, 5490)  # 320: a 15x11 grid's dof, 5490: the dense grid's
F = (1e-8, 1e-3, 0.05, 0.3, 1.0, 2.0, 4.1, 10.0, 60.0, 500.0, 1e4, 1e7)


@pytest.mark.parametrize("dfn", DFN)
def test_f_survival_equals_scipy_fdtrc(dfn):
    for dfd in DFD:
        for f in F:
            ref = float(special.fdtrc(dfn, dfd, f))
            if ref < 1e-290:  # below that both are subnormal or zero
                continue
            assert f_survival(dfn, dfd, f) == pytest.approx(ref, rel=1e-10, abs=0), (dfn, dfd, f)


def test_small_p_values_keep_relative_accuracy():
    # The F-test of a strong decentring (p ~ 1e-22 and far smaller): relative, not absolute.
    for dfn, dfd, f in ((2, 320, 60.0), (2, 5490, 400.0), (1, 160, 900.0)):
        ref = float(special.fdtrc(dfn, dfd, f))
        assert 0 < ref < 1e-20
        assert f_survival(dfn, dfd, f) == pytest.approx(ref, rel=1e-10, abs=0)


def test_incomplete_beta_equals_scipy_betainc():
    rng = np.random.default_rng(1)
    for a, b, x in zip(rng.uniform(0.2, 300, 300), rng.uniform(0.2, 300, 300), rng.uniform(0, 1, 300)):
        ref = float(special.betainc(a, b, x))
        if ref > 1e-290:
            assert regularized_incomplete_beta(a, b, x) == pytest.approx(ref, rel=1e-10, abs=1e-300)


def test_edges_and_bad_input():
    assert f_survival(2, 10, 0.0) == 1.0
    assert f_survival(2, 10, -1.0) == 1.0
    assert f_survival(2, 10, math.inf) == 0.0
    assert math.isnan(f_survival(2, 10, math.nan))
    assert regularized_incomplete_beta(2.0, 3.0, 0.0) == 0.0
    assert regularized_incomplete_beta(2.0, 3.0, 1.0) == 1.0
    with pytest.raises(ValueError, match="degrees of freedom"):
        f_survival(0, 10, 1.0)
    with pytest.raises(ValueError, match="0 <= x <= 1"):
        regularized_incomplete_beta(1.0, 1.0, 1.5)
