"""Glow: light spread in the face glass that moves no light."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from hypothesis import given, settings as hyp_settings, strategies as st

from crtfilter.audit import measure_codes
from crtfilter.engine import render_codes
from crtfilter.errors import SettingsError
from crtfilter.glow import GlowSettings, apply_glow, spread
from crtfilter.pipeline import render_linear
from crtfilter.presets import load_preset


@hyp_settings(max_examples=30, deadline=None)
@given(h=st.integers(1, 40), w=st.integers(1, 60), half=st.integers(1, 30), seed=st.integers(0, 2**16))
def test_spreading_keeps_every_channels_light_to_1e6(h, w, half, seed):
    y = np.random.default_rng(seed).uniform(0, 1, (h, w, 3)).astype(np.float32)
    out = spread(y, half)
    np.testing.assert_allclose(out.sum(axis=(0, 1), dtype=np.float64), y.sum(axis=(0, 1), dtype=np.float64),
                               rtol=1e-6)
    assert out.min() >= 0 and out.max() <= y.max() * (1 + 1e-6)


def test_glow_keeps_the_mean_at_the_edges_too():
    # all the light in one corner pixel: none may leave the picture
    y = np.zeros((30, 40, 3), np.float32)
    y[0, 0] = 1.0
    out = apply_glow(y.copy(), GlowSettings(share=0.5, radius=30))
    assert out.sum(dtype=np.float64) == pytest.approx(3.0, rel=1e-6)
    assert out[0, 0, 0] < 1.0 and out[10, 10, 0] > 0  # and it did spread


def test_a_uniform_picture_stays_uniform_under_glow():
    # mirrored at its edges, a flat field has nothing to spread: no bright or dark rim
    y = np.full((20, 50, 3), 0.3, np.float32)
    out = apply_glow(y.copy(), GlowSettings(share=0.5, radius=60))  # a reach beyond the picture
    np.testing.assert_allclose(out, 0.3, rtol=1e-6)


def test_glow_mean_before_and_after_in_linear_light():
    image = np.random.default_rng(5).integers(0, 256, (24, 32, 3)).astype(np.uint8)
    plain = load_preset().settings
    glowing = dataclasses.replace(plain, glow=GlowSettings(share=0.3, radius=20))
    before, _ = render_linear(image, plain)
    after, _ = render_linear(image, glowing)
    assert after.mean(dtype=np.float64) == pytest.approx(before.mean(dtype=np.float64), rel=1e-6)
    assert np.abs(after - before).max() > 0.01  # a glow that shows


@pytest.mark.parametrize("engine", ["reference", "auto"])
def test_the_glow_preset_writes_its_light_within_the_rounding_bound(engine):
    settings = load_preset("aperture-glow-within-4k").settings
    assert settings.glow.on
    for image in (np.random.default_rng(2).integers(0, 256, (24, 32, 3)).astype(np.uint8),
                  np.full((24, 32, 3), 12, np.uint8)):
        r = render_codes(image, settings, engine=engine)
        kept = measure_codes(r.codes, r.geometry, r.encoding).luminance / r.source_luminance
        assert kept == pytest.approx(1.0, abs=0.002)


def test_both_paths_glow_alike():
    image = np.random.default_rng(9).integers(0, 256, (24, 32, 3)).astype(np.uint8)
    settings = load_preset("aperture-glow-within-4k").settings
    ref, fast = (render_codes(image, settings, engine=e) for e in ("reference", "auto"))
    assert fast.route == "fused"
    assert np.abs(ref.codes.astype(int) - fast.codes.astype(int)).max() <= 2
    lum = [measure_codes(r.codes, r.geometry, r.encoding).luminance for r in (ref, fast)]
    assert lum[1] == pytest.approx(lum[0], rel=2e-4)


def test_no_shipped_preset_but_one_glows_and_bad_glow_settings_are_refused():
    from crtfilter.presets import all_presets

    assert [p.name for p in all_presets() if p.settings.glow.on] == ["aperture-glow-within-4k"]
    with pytest.raises(SettingsError, match="glow share must be between 0 and 0.5"):
        load_preset().with_options(glow_share=0.9)
    with pytest.raises(SettingsError, match="glow radius"):
        load_preset().with_options(glow_share=0.1, glow_radius=0.1)
