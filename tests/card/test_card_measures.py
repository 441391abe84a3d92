"""Imbalance measures, the imbalance degree and the Wilson interval, against hand computations
and a general-purpose reference library.

References used:
- Pielou, "The measurement of diversity in different types of biological collections",
  J. Theoretical Biology 13 (1966): evenness J = H / ln K (from memory).
- Ortigosa-Hernandez, Inza and Lozano, "Measuring the class-imbalance extent of multi-class
  problems", Pattern Recognition Letters 98 (2017) 32-38: ID = (m - 1) + d(zeta, e) / d(iota_m, e)
  (definition from memory of the paper; the values below are computed by hand from it).
- Wilson, JASA 22 (1927) 209-212, and scipy.stats.binomtest(...).proportion_ci(method="wilson")
  as the reference implementation (general-purpose library).
"""

from __future__ import annotations

import math

import pytest
from scipy.stats import binomtest

from prep.card import stats


def test_imbalance_ratio_and_pielou_for_90_10():
    counts = {"a": 90, "b": 10}
    assert stats.imbalance_ratio(counts) == 9.0
    # Hand computation: H = -(0.9 ln 0.9 + 0.1 ln 0.1) = 0.325083 nats; J = H / ln 2 = 0.468996.
    assert stats.pielou_evenness(counts) == pytest.approx(0.4690, abs=5e-5)


def test_imbalance_degree_binary_90_10_euclidean_and_total_variation():
    # K = 2, zeta = (0.9, 0.1), e = (0.5, 0.5), one minority class, iota_1 = (1, 0).
    # Euclidean: d(zeta, e) = sqrt(2 * 0.4^2) = 0.565685; d(iota_1, e) = sqrt(2 * 0.5^2) = 0.707107.
    # ID = (1 - 1) + 0.565685 / 0.707107 = 0.8. Total variation: 0.4 / 0.5 = 0.8 too.
    counts = {"a": 90, "b": 10}
    assert stats.imbalance_degree(counts, "euclidean") == pytest.approx(0.8, abs=1e-12)
    assert stats.imbalance_degree(counts, "total_variation") == pytest.approx(0.8, abs=1e-12)


def test_imbalance_degree_binary_90_10_hellinger():
    # Hellinger, the distance the card names: sum (sqrt a - sqrt b)^2 by hand:
    # zeta:   (0.948683 - 0.707107)^2 + (0.316228 - 0.707107)^2 = 0.058359 + 0.152786 = 0.211146
    # iota_1: (1 - 0.707107)^2 + (0 - 0.707107)^2                = 0.085786 + 0.5      = 0.585786
    # ID = sqrt(0.211146 / 0.585786) = 0.600372 (the 1/sqrt 2 factors cancel).
    assert stats.imbalance_degree({"a": 90, "b": 10}) == pytest.approx(0.600372, abs=2e-6)
    assert stats.IMBALANCE_DEGREE_DISTANCE == "hellinger"


def test_imbalance_degree_three_classes_two_minorities():
    # Counts 60/30/10: zeta = (0.6, 0.3, 0.1), K = 3, e = 1/3 each; 0.3 and 0.1 are below 1/3, m = 2.
    # iota_2 = (1, 0, 0). Euclidean: d(zeta, e)^2 = (0.266667^2 + 0.033333^2 + 0.233333^2) = 0.126667,
    # d(iota_2, e)^2 = (2/3)^2 + 2 (1/3)^2 = 0.666667. ID = 1 + sqrt(0.126667 / 0.666667) = 1.435890.
    assert stats.imbalance_degree({"x": 60, "y": 30, "z": 10}, "euclidean") == pytest.approx(1.435890, abs=1e-6)


@pytest.mark.parametrize("distance", ["euclidean", "hellinger", "total_variation", "manhattan", "chebyshev"])
def test_imbalance_degree_properties(distance):
    assert stats.imbalance_degree({"a": 5, "b": 5, "c": 5}, distance) == 0.0  # balanced
    # The extreme distribution with m minority classes scores exactly m (= (m - 1) + 1).
    assert stats.imbalance_degree({"a": 0, "b": 0, "c": 9}, distance) == pytest.approx(2.0)
    # With m minority classes the value lies in (m - 1, m]; relabelling does not change it.
    value = stats.imbalance_degree({"a": 50, "b": 30, "c": 15, "d": 5}, distance)
    assert 1.0 < value <= 2.0  # 15 and 5 are below n/K = 25: m = 2
    assert stats.imbalance_degree({"q": 5, "r": 15, "s": 30, "t": 50}, distance) == pytest.approx(value)
    assert stats.imbalance_degree({"only": 3}, distance) is None
    assert stats.imbalance_degree({"a": 0, "b": 0}, distance) is None


@pytest.mark.parametrize("k, n", [(8, 10), (0, 7), (7, 7), (45, 120), (1, 1), (333, 1000)])
def test_wilson_interval_against_scipy(k, n):
    # Reference: scipy's Wilson score interval (scipy.stats.binomtest, method="wilson").
    ref = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    low, high = stats.wilson_interval(k, n)
    assert low == pytest.approx(ref.low, abs=1e-12)
    assert high == pytest.approx(ref.high, abs=1e-12)


def test_wilson_worked_example_by_hand():
    # k = 8, n = 10, z = 1.959964: centre = (8 + 1.920729) / 13.841459 = 0.716733;
    # half = 1.959964 * sqrt(10) / 13.841459 * sqrt(0.16 + 0.096036) = 0.226585.
    low, high = stats.wilson_interval(8, 10)
    assert (low, high) == (pytest.approx(0.490162, abs=2e-6), pytest.approx(0.943318, abs=2e-6))


@pytest.mark.parametrize("n", [1, 5, 12, 79, 1000])
def test_wilson_width_is_the_interval_width_and_widest_at_one_half(n):
    for p in (0.5, 0.9):
        k = p * n
        if k.is_integer():
            ref = binomtest(int(k), n).proportion_ci(method="wilson")  # reference: scipy
            assert stats.wilson_width(p, n) == pytest.approx(ref.high - ref.low, abs=1e-12)
    assert all(stats.wilson_width(0.5, n) >= stats.wilson_width(p / 20, n) for p in range(21))
    assert stats.wilson_width(0.5, 0) is None


def test_z_is_the_normal_quantile():
    from scipy.stats import norm  # reference: scipy's normal quantile function

    assert stats.Z_95 == pytest.approx(norm.ppf(0.975), abs=1e-12)
    assert not math.isnan(stats.Z_95)
