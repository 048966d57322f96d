"""Preset files: the shipped looks, and the messages for every kind of mistake."""

from __future__ import annotations

from pathlib import Path

import pytest

from crtfilter import SettingsError
from crtfilter.masks import MaskSettings
from crtfilter.presets import (
    DEFAULT_PRESET,
    all_presets,
    load_preset,
    load_preset_file,
    settings_dict,
    shipped_folder,
    shipped_names,
)


def write(tmp_path, text: str, name: str = "look.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_six_to_ten_distinct_shipped_presets_with_descriptions():
    presets = all_presets()
    # six to ten looks, and since the glow, an eleventh that is the finest stripes with it
    assert 6 <= len(presets) <= 11
    assert DEFAULT_PRESET in shipped_names()
    assert all(p.description for p in presets)
    looks = {repr(settings_dict(p.settings)) for p in presets}
    assert len(looks) == len(presets), "two presets resolve to the same settings"


def test_shipped_presets_are_found_installed_or_in_a_checkout():
    import crtfilter

    folder = shipped_folder()
    assert (folder / f"{DEFAULT_PRESET}.toml").is_file()
    package = Path(crtfilter.__file__).resolve().parent
    # installed: package data crtfilter/presets; in a checkout: presets/ beside crtfilter/
    assert folder in (package / "presets", package.parent / "presets")


def test_a_preset_file_overrides_only_what_it_says(tmp_path):
    preset = load_preset(write(tmp_path, '[mask]\nphosphor = "dots"\n'))
    assert preset.name == "look"
    assert preset.settings.mask.phosphor == "dots"
    assert preset.settings.mask.triad_pitch == MaskSettings().triad_pitch


@pytest.mark.parametrize("text, message", [
    ("[mask]\ntriad_pich = 3\n", r"look.toml: \[mask\] unknown key 'triad_pich'; did you mean 'triad_pitch'\?"),
    ("[maks]\nphosphor = 'slot'\n", r"look.toml: unknown table or key 'maks'; did you mean 'mask'\?"),
    ("[mask]\ntriad_pitch = 100\n", r"look.toml: \[mask\] triad_pitch must be between 1.5 and 64.0 \(got 100\)"),
    ("[mask]\nscanline_strength = 1.5\n", r"\[mask\] scanline_strength must be between 0.0 and 1.0"),
    ("[mask]\nphosphor = 'slott'\n", r"unknown phosphor layout 'slott'; did you mean 'slot'\?"),
    ("[mask]\nscanlines = 'yes'\n", r"\[mask\] scanlines must be true or false \(got 'yes'\)"),
    ("[mask]\ntriad_pitch = '3'\n", r"\[mask\] triad_pitch must be a number \(got '3'\)"),
    ("[output]\nkernel = 'lanczos'\n", r"unknown kernel 'lanczos'; did you mean 'lanczos3'\?"),
    ("[output]\nfit = '4k'\n", r"fit must look like 3840x2160 \(got '4k'\)"),
    ("[tone]\nsoftness = 2\n", r"\[tone\] softness must be between 0 and 1"),
    ("[source]\ntransfer = 'linear'\n", r"unknown transfer 'linear'"),
    ("description = 5\n", r"description must be text"),
])
def test_mistakes_name_the_file_the_key_and_what_is_allowed(tmp_path, text, message):
    with pytest.raises(SettingsError, match=message):
        load_preset(write(tmp_path, text))


def test_toml_syntax_errors_give_line_and_column(tmp_path):
    with pytest.raises(SettingsError, match=r"look.toml: TOML syntax error: .*line 2, column \d+"):
        load_preset_file(write(tmp_path, "[mask]\ntriad_pitch = = 3\n"))


def test_unknown_preset_names_suggest_the_closest(tmp_path):
    with pytest.raises(SettingsError, match=r"unknown preset 'dots-fine-4'; did you mean 'dots-fine-within-4k'\?"):
        load_preset("dots-fine-4")
    with pytest.raises(SettingsError, match=r"no such preset file"):
        load_preset(str(tmp_path / "missing.toml"))


def test_inadmissible_slope_is_refused_when_the_mask_is_known():
    import dataclasses

    from crtfilter.audit import preset_figures
    from crtfilter.tone import ToneSettings

    preset = load_preset("slot-medium-within-4k")
    steep = dataclasses.replace(preset.settings, tone=ToneSettings(slope=20.0))
    with pytest.raises(SettingsError, match=r"slope 20 needs mask mean <= 0.05; this mask's mean is 0.2"):
        preset_figures(steep)


def test_command_line_options_lay_over_a_preset():
    preset = load_preset("slot-medium-within-4k")
    over = preset.with_options(size="1920x1080", pixel_aspect="8:7", transfer="bt1886", depth=16)
    assert over.settings.geometry.size == "1920x1080" and over.settings.geometry.scale is None
    assert over.settings.geometry.pixel_aspect == "8:7"
    assert over.settings.decode.transfer == "bt1886" and over.settings.depth == 16
    assert over.settings.mask == preset.settings.mask
    assert preset.with_options() is preset
