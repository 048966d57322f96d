"""Tests for the energy-balanced tone pair: admissibility, slope, Horner form, energy."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
from hypothesis import example, given
from hypothesis import settings as hypothesis_settings
from hypothesis import strategies as st
from numpy.polynomial import Polynomial
from numpy.polynomial import polynomial as poly

from crtfilter.errors import SettingsError
from crtfilter.tone import (
    _ADMISSIBLE_TOL,
    BALANCED_CURVES,
    CURVES,
    TonePair,
    ToneSettings,
    _horner_in_u,
    _validate,
    tone_pair,
)

#: float64 round-off of a handful of operations on values in [0, 1]; the mean
#: over a cell and the curve identities below are exact in real arithmetic.
ROUND_OFF = 1e-12

#: A dense grid of linear values on [0, 1].
GRID = np.linspace(0.0, 1.0, 2049)

#: Above this mask mean the cut curve's division by 1 - mu loses its digits;
#: that range is the subject of test_nearly_open_mask_is_solved (a known bug).
MU_TOP = 1.0 - 1e-5

PROPERTY = hypothesis_settings(max_examples=100, deadline=None)

#: Mask means in (0.02, 1]: the open mask (mu = 1) is drawn on purpose.
means = st.one_of(st.floats(min_value=0.02, max_value=MU_TOP, exclude_min=True), st.just(1.0))


def lift_slope_at_black(pair: TonePair, h: float = 1e-6) -> float:
    """One-sided second-order difference (-3 L(0) + 4 L(h) - L(2 h)) / (2 h)."""
    values = pair.lift(np.array([0.0, h, 2.0 * h]))
    return float((-3.0 * values[0] + 4.0 * values[1] - values[2]) / (2.0 * h))


def assert_admissible(pair: TonePair, x: np.ndarray = GRID) -> None:
    """0 <= C(x) <= x <= L(x) <= 1, L(0) = 0, L(1) = 1 and L concave on the grid."""
    lift, cut = pair.lift(x), pair.cut(x)
    tol = _ADMISSIBLE_TOL
    assert (cut >= -tol).all(), f"C < 0: min {cut.min()}"
    assert (cut <= x + tol).all(), f"C > x by {(cut - x).max()}"
    assert (lift >= x - tol).all(), f"L < x by {(x - lift).max()}"
    assert (lift <= 1.0 + tol).all(), f"L > 1: max {lift.max()}"
    assert pair.lift(np.array([0.0, 1.0])) == pytest.approx([0.0, 1.0], abs=ROUND_OFF)
    second = lift[:-2] - 2.0 * lift[1:-1] + lift[2:]
    assert (second <= ROUND_OFF).all(), f"L not concave: second difference {second.max()}"


# --------------------------------------------------------------------------
# Admissibility over every admissible request


@pytest.mark.parametrize("curve", ["blend", "integer", "exponent"])
@PROPERTY
@given(mu=means, fraction=st.floats(min_value=0.0, max_value=1.0))
@example(mu=1.0, fraction=1.0)
@example(mu=0.25, fraction=1.0)
@example(mu=0.021, fraction=1.0)
def test_every_admissible_slope_gives_an_admissible_pair(curve, mu, fraction):
    s = min(1.0 + fraction * (1.0 / mu - 1.0), 1.0 / mu)
    pair = tone_pair(mu, ToneSettings(curve=curve, slope=s))
    assert_admissible(pair)
    if curve == "integer":
        # The largest whole degree that does not exceed s.
        assert pair.slope == pair.degree
        assert pair.degree <= s * (1 + 1e-12) and s - pair.degree < 1
        assert lift_slope_at_black(pair) == pytest.approx(pair.degree, rel=1e-6)
    else:
        assert pair.slope == pytest.approx(s, rel=ROUND_OFF)
        # Follows from the docstring's closed forms: L'(0) = n + t for blend, s for exponent.
        assert lift_slope_at_black(pair) == pytest.approx(s, rel=1e-6)


@PROPERTY
@given(mu=means, fraction=st.floats(min_value=0.0, max_value=1.0))
def test_piecewise_pair_is_admissible_and_ignores_the_slope(mu, fraction):
    s = min(1.0 + fraction * (1.0 / mu - 1.0), 1.0 / mu)
    pair = tone_pair(mu, ToneSettings(curve="piecewise", slope=s))
    assert_admissible(pair)
    assert pair.slope == pytest.approx(1.0 / mu, rel=ROUND_OFF)
    assert lift_slope_at_black(pair) == pytest.approx(1.0 / mu, rel=1e-6)


@pytest.mark.parametrize("mu, curve", [(1 - 1e-9, "integer"), (1 - 1e-12, "blend"), (1 - 1e-12, "exponent")])
def test_nearly_open_mask_is_solved(mu, curve):
    # A mask with mean just below 1 (a faint scanline pattern) admits the identity
    # L = C = x at least, so the solver must not refuse it.
    pair = tone_pair(mu, ToneSettings(curve=curve))
    assert_admissible(pair)


# --------------------------------------------------------------------------
# Refusals


@PROPERTY
@given(
    mu=st.floats(min_value=0.02, max_value=0.9, exclude_min=True),
    margin=st.floats(min_value=0.01, max_value=0.25),
    curve=st.sampled_from(sorted(BALANCED_CURVES)),
)
def test_too_steep_a_slope_is_refused_with_numbers(mu, margin, curve):
    s = (1.0 / mu) * (1.0 + margin)
    with pytest.raises(SettingsError, match=r"slope .* needs mask mean <= .*this mask's mean is") as info:
        tone_pair(mu, ToneSettings(curve=curve, slope=s))
    numbers = re.search(
        r"slope (\S+) needs mask mean <= (\S+); this mask's mean is (\S+)$", str(info.value)
    )
    assert numbers is not None, str(info.value)
    said_slope, said_bound, said_mean = (float(v) for v in numbers.groups())
    # Printed to 4 or 6 significant digits.
    assert said_slope == pytest.approx(s, rel=1e-5)
    assert said_bound == pytest.approx(1.0 / s, rel=1e-3)
    assert said_mean == pytest.approx(mu, rel=1e-3)


def test_too_steep_a_polynomial_drives_the_cut_curve_below_black():
    # common practice, no source: a polynomial lift too aggressive for the mask
    # pushes the cut curve below zero near black.
    pair = TonePair(mu=0.4, curve="integer", slope=3, degree=3, horner=_horner_in_u(3, 0.0))
    x = np.linspace(1e-4, 0.15, 64)
    # Follows from C = (x - mu L) / (1 - mu) and L_3 = 3 x - 3 x^2 + x^3: C < 0 for 0 < x < 0.177.
    assert (pair.cut(x) < 0).all()
    with pytest.raises(SettingsError, match=r"cut curve falls to -"):
        _validate(pair)
    with pytest.raises(SettingsError, match=r"slope 3 needs mask mean <= 0\.3333; this mask's mean is 0\.4"):
        tone_pair(0.4, ToneSettings(slope=3))


@pytest.mark.parametrize("mu", [0.0, -0.1, 1.5, float("nan")])
def test_mask_mean_outside_the_unit_interval_is_refused(mu):
    with pytest.raises(SettingsError, match=r"mask mean must be in \(0, 1\]"):
        tone_pair(mu)


def test_unknown_curve_suggests_a_close_match():
    with pytest.raises(SettingsError, match=r"unknown curve 'blnd'; did you mean 'blend'\?"):
        ToneSettings(curve="blnd")


@pytest.mark.parametrize("softness", [-0.01, 1.01, 7.0, float("nan")])
def test_softness_outside_its_range_is_refused(softness):
    with pytest.raises(SettingsError, match=r"softness must be between 0 and 1 \(got "):
        ToneSettings(softness=softness)


@pytest.mark.parametrize("slope", [0.5, 64.5])
def test_slope_outside_its_range_is_refused(slope):
    with pytest.raises(SettingsError, match=r"slope must be between 1 and 64 \(got "):
        ToneSettings(slope=slope)


# --------------------------------------------------------------------------
# The slope bound and softness


@pytest.mark.parametrize("mu", [0.05, 0.25, 0.31, 1 / 3, 0.6, 0.9])
@pytest.mark.parametrize("curve", ["blend", "exponent", "piecewise"])
def test_default_slope_is_the_bound(mu, curve):
    # C >= 0 exactly when L <= x / mu (module docstring): the steepest concave L has slope 1 / mu.
    pair = tone_pair(mu, ToneSettings(curve=curve))
    assert pair.slope == pytest.approx(1.0 / mu, rel=ROUND_OFF)
    assert lift_slope_at_black(pair) == pytest.approx(1.0 / mu, rel=1e-6)


@pytest.mark.parametrize("mu", [0.05, 0.31, 0.6, 0.9])
@pytest.mark.parametrize("curve", ["blend", "integer", "exponent"])
def test_softness_one_is_the_identity(mu, curve):
    pair = tone_pair(mu, ToneSettings(curve=curve, softness=1.0))
    assert pair.slope == 1.0
    np.testing.assert_allclose(pair.lift(GRID), GRID, rtol=0, atol=ROUND_OFF)
    np.testing.assert_allclose(pair.cut(GRID), GRID, rtol=0, atol=ROUND_OFF)


@pytest.mark.parametrize("mu", [0.05, 0.31, 0.6, 0.9])
@pytest.mark.parametrize("softness", [0.1, 0.37, 0.5, 0.9])
@pytest.mark.parametrize("curve", ["blend", "exponent"])
def test_softness_scales_the_slope_between_bound_and_identity(mu, softness, curve):
    pair = tone_pair(mu, ToneSettings(curve=curve, softness=softness))
    expected = 1.0 + (1.0 / mu - 1.0) * (1.0 - softness)
    assert pair.slope == pytest.approx(expected, rel=ROUND_OFF)
    assert lift_slope_at_black(pair) == pytest.approx(expected, rel=1e-6)
    assert_admissible(pair)


# --------------------------------------------------------------------------
# Why two degrees are blended


@pytest.mark.parametrize("mu", [0.51, 0.6, 0.75, 0.99])
def test_integer_degrees_alone_show_no_mask_above_half(mu):
    # Follows from n = floor(1 / mu) = 1 for mu > 1/2 and L_1(x) = x.
    pair = tone_pair(mu, ToneSettings(curve="integer"))
    assert pair.degree == 1
    np.testing.assert_allclose(pair.lift(GRID), GRID, rtol=0, atol=ROUND_OFF)
    assert float(pair.visibility(np.array(0.18))) == pytest.approx(0.0, abs=ROUND_OFF)


def test_blend_shows_the_mask_above_half():
    pair = tone_pair(0.6, ToneSettings())
    assert pair.curve == "blend"
    # L(0.18) = 1 - 0.82 (1 - 0.18 * 2/3) = 0.2784, C = (0.18 - 0.6 L) / 0.4 = 0.0324.
    assert float(pair.visibility(np.array(0.18))) > 0.2
    assert float(pair.visibility(np.array(0.18))) == pytest.approx(0.246 / 0.3108, rel=1e-9)


# --------------------------------------------------------------------------
# Horner coefficients


def _horner_by_loop(coeffs: tuple[float, ...], u: float) -> float:
    acc = 0.0
    for c in coeffs:
        acc = acc * u + c
    return acc


@pytest.mark.parametrize("mu", [0.1, 0.23, 0.31, 1 / 3, 0.45, 0.6, 0.85])
@pytest.mark.parametrize("curve", ["blend", "integer"])
def test_horner_coefficients_are_the_lift_polynomial(mu, curve):
    pair = tone_pair(mu, ToneSettings(curve=curve))
    n, t = pair.degree, pair.blend
    assert n == math.floor(pair.slope)
    assert len(pair.horner) == n + 2  # n + 1 multiply-adds
    x = GRID
    by_loop = np.array([_horner_by_loop(pair.horner, 1.0 - xi) for xi in x])
    np.testing.assert_allclose(by_loop, pair.lift(x), rtol=0, atol=ROUND_OFF)
    closed = 1.0 - (1.0 - x) ** n * (1.0 - t * x)
    np.testing.assert_allclose(pair.lift(x), closed, rtol=0, atol=ROUND_OFF)

    # The same polynomial, ascending powers of x: expand 1 - (1 - x)^n (1 - t x)
    # and compare with the Horner coefficients (powers of u = 1 - x) rewritten in x.
    expanded = poly.polysub([1.0], poly.polymul(poly.polypow([1.0, -1.0], n), [1.0, -t]))
    from_horner = Polynomial(pair.horner[::-1])(Polynomial([1.0, -1.0])).coef
    size = max(len(expanded), len(from_horner))
    expanded = np.pad(expanded, (0, size - len(expanded)))
    from_horner = np.pad(from_horner, (0, size - len(from_horner)))
    scale = np.abs(expanded).max()
    np.testing.assert_allclose(from_horner, expanded, rtol=0, atol=ROUND_OFF * scale)


def test_horner_of_integer_degree_has_no_blend_term():
    # L_n = 1 - u^n: the top coefficient (power n + 1) is zero.
    assert _horner_in_u(3, 0.0) == (-0.0, -1.0, 0.0, 0.0, 1.0)


# --------------------------------------------------------------------------
# Energy and the mix of the two curves


@PROPERTY
@given(
    cell=st.lists(st.floats(min_value=0.0, max_value=1.0), min_size=2, max_size=48),
    x=st.floats(min_value=0.0, max_value=1.0),
    curve=st.sampled_from(sorted(BALANCED_CURVES)),
    softness=st.floats(min_value=0.0, max_value=1.0),
)
def test_mean_over_a_cell_is_the_input(cell, x, curve, softness):
    m = np.array(cell, dtype=np.float64)
    mu = float(m.mean())
    if not (0.02 < mu <= MU_TOP):
        m = np.concatenate([m, 1.0 - m])  # mean exactly 1/2 in real arithmetic
        mu = float(m.mean())
    pair = tone_pair(mu, ToneSettings(curve=curve, softness=softness))
    k = (m - mu) / (1.0 - mu)
    y = pair.apply(np.full_like(m, x), k)
    # Follows from mean(k) = 0: the mean of x + k (L - x) is x.
    assert float(y.mean()) == pytest.approx(x, abs=ROUND_OFF)


@pytest.mark.parametrize("mu", [0.05, 0.31, 0.6, 0.9])
@pytest.mark.parametrize("curve", sorted(CURVES))
def test_open_mask_gets_the_lift_and_closed_mask_the_cut(mu, curve):
    pair = tone_pair(mu, ToneSettings(curve=curve))
    np.testing.assert_allclose(pair.apply(GRID, np.ones_like(GRID)), pair.lift(GRID), rtol=0, atol=ROUND_OFF)
    closed = np.full_like(GRID, -mu / (1.0 - mu))  # k at m = 0
    np.testing.assert_allclose(pair.apply(GRID, closed), pair.cut(GRID), rtol=0, atol=ROUND_OFF)


@pytest.mark.parametrize("mu", [0.05, 0.25, 0.4, 0.6, 0.9])
def test_piecewise_pair_is_the_limiting_pair(mu):
    pair = tone_pair(mu, ToneSettings(curve="piecewise"))
    np.testing.assert_allclose(pair.lift(GRID), np.minimum(1.0, GRID / mu), rtol=0, atol=ROUND_OFF)
    np.testing.assert_allclose(pair.cut(GRID), np.maximum(0.0, (GRID - mu) / (1.0 - mu)), rtol=0, atol=ROUND_OFF)


def test_fully_open_mask_gives_the_identity():
    for curve in CURVES:
        pair = tone_pair(1.0, ToneSettings(curve=curve))
        np.testing.assert_allclose(pair.lift(GRID), GRID, rtol=0, atol=ROUND_OFF)
        np.testing.assert_array_equal(pair.cut(GRID), GRID)


@pytest.mark.parametrize("mu", [0.2, 0.31, 0.6])
def test_the_multiply_reference_darkens_by_the_mask_mean(mu):
    # y = m x: over a cell the mean is mu x, the darkening the balanced pairs avoid
    m = np.linspace(0.0, 2 * mu, 101) if mu <= 0.5 else np.linspace(2 * mu - 1, 1.0, 101)
    pair = tone_pair(float(m.mean()), ToneSettings(curve="multiply"))
    assert not pair.balanced
    x = 0.4
    y = pair.apply(np.full_like(m, x), (m - m.mean()) / (1 - m.mean()))
    np.testing.assert_allclose(y, m * x, rtol=0, atol=ROUND_OFF)
    assert float(y.mean()) == pytest.approx(m.mean() * x, abs=ROUND_OFF)
