"""Every preset setting as a control of the tuning page, and the page's values as a preset.

The ranges and choices are the ones the stages' own validation checks (the
``LIMITS`` tables and choice lists of :mod:`crtfilter.masks`, :mod:`crtfilter.tone`,
:mod:`crtfilter.glow`, ...), and the page's values are turned into settings by
:func:`crtfilter.presets.settings_from_dict`, the preset loader's own check: what the
page accepts, a preset file accepts, with the same messages.
"""

from __future__ import annotations

import math
import os
import tomllib
from pathlib import Path

from .. import capture, color, glow, masks, rounding, scale, tone
from ..errors import SettingsError
from ..presets import (_STAGES, _TABLES, Preset, _field_kind, _toml_value, settings_dict, settings_from_dict,
                       shipped_folder, shipped_names)
from ..plan import Settings

#: The preset tables in the page's order, with the heading of each group of controls.
GROUPS = {"source": "Source", "output": "Size and output", "mask": "Mask", "tone": "Tone", "glow": "Glow"}

#: Choices of the text settings that take one of a list.
CHOICES: dict[tuple[str, str], tuple] = {
    ("source", "transfer"): tuple(color.TRANSFERS),
    ("source", "primaries"): tuple(color.PRIMARIES),
    ("source", "white"): tuple(color.WHITES),
    ("source", "white_adaptation"): ("bradford", "none"),
    ("output", "kernel"): tuple(scale.KERNELS),
    ("output", "depth"): (8, 16),
    ("output", "dither"): tuple(color.DITHERS),
    ("output", "rounding"): tuple(rounding.ROUNDINGS),
    ("output", "range"): tuple(color.OUTPUT_RANGES),
    ("mask", "phosphor"): tuple(masks.PHOSPHORS),
    ("mask", "order"): tuple(masks.ORDERS),
    ("mask", "orientation"): tuple(masks.ORIENTATIONS),
    ("tone", "curve"): tuple(tone.CURVES),
}

#: Allowed ranges of the number settings, (low, high), both allowed.
RANGES: dict[tuple[str, str], tuple[float, float]] = {
    **{("mask", k): v for k, v in masks.LIMITS.items()},
    **{("tone", k): v for k, v in tone.LIMITS.items()},
    **{("glow", k): v for k, v in glow.LIMITS.items()},
    ("source", "overscan"): (0.0, capture.MAX_OVERSCAN),
    ("output", "scale"): (0.0, scale.MAX_SCALE),  # above 0
    ("output", "reference_white"): color.REFERENCE_WHITE_LIMITS,
    ("output", "peak"): (color.REFERENCE_WHITE_LIMITS[0], color.PQ_PEAK),  # from the reference white
}

#: What a text setting holds, for the hint beside its field.
HINTS = {
    ("source", "alpha"): "keep, or over:COLOUR (over:black, over:#202830)",
    ("source", "pixel_aspect"): "W:H of one source pixel, e.g. 8:7",
    ("source", "display_aspect"): "W:H of the whole picture, e.g. 4:3 (empty: from the pixel aspect)",
    ("source", "crop"): "X,Y,W,H of the frame (empty: the whole frame)",
    ("output", "fit"): "WxH: the box the picture is whole-scaled to fit within",
    ("output", "size"): "WxH: the output's exact size (empty: just the picture)",
    ("output", "scale"): "output pixels per source pixel (empty: the largest that fits)",
    ("tone", "slope"): "empty: the softness decides the slope",
    ("output", "peak"): "cd/m², from the reference white up to 10000",
}


def _step(lo: float, hi: float) -> float:
    """A slider step: a round power of ten giving a few hundred positions."""
    return 10.0 ** math.floor(math.log10((hi - lo) / 200.0))


def _defaults() -> dict[str, dict]:
    return settings_dict(Settings(), written_depth=False)


def controls(preset: Preset) -> list[dict]:
    """The page's controls for ``preset``, group by group.

    Returns
    -------
    list of dict
        ``{"table", "heading", "controls": [{"key", "kind" ("number", "bool", "choice",
        "text"), "value", "optional" (may be left unset), "min", "max", "step",
        "choices", "hint"}]}``.
    """
    values, defaults = settings_dict(preset.settings, written_depth=False), _defaults()
    groups = []
    for table, heading in GROUPS.items():
        items = []
        for key, (stage, name) in _TABLES[table].items():
            kind = _field_kind(_STAGES[stage] if stage else Settings, name)
            item = {"key": key, "value": values[table][key], "optional": defaults[table][key] is None,
                    "hint": HINTS.get((table, key), "")}
            if (table, key) in CHOICES:
                item.update(kind="choice", choices=list(CHOICES[table, key]))
            elif kind == "number" and (table, key) in RANGES:
                lo, hi = RANGES[table, key]
                item.update(kind="number", min=lo, max=hi, step=_step(lo, hi))
            else:
                item["kind"] = "text" if kind == "number" else kind
            items.append(item)
        groups.append({"table": table, "heading": heading, "controls": items})
    return groups


def _coerce(table: str, key: str, value):
    """A value as the page sends it, as a preset file would hold it: numbers typed as text
    are read as numbers (the preset loader then checks them), empty text means unset."""
    if isinstance(value, str):
        value = value.strip()
        if value == "":
            return None
        stage, name = _TABLES[table][key]
        if _field_kind(_STAGES[stage] if stage else Settings, name) == "number":
            try:
                return int(value) if value.lstrip("+-").isdigit() else float(value)
            except ValueError:
                raise SettingsError(f"[{table}] {key} must be a number (got {value!r})") from None
    return value


def preset_from_values(start: Preset, values: dict) -> Preset:
    """The starting preset with the page's ``values`` (``{table: {key: value}}``) laid over it.

    Raises
    ------
    SettingsError
        For an unknown table or key, a value of the wrong kind or out of range (the
        preset loader's messages), or a setting the starting preset sets and the page
        leaves unset (a preset that extends another cannot unset what it sets).
    """
    if not isinstance(values, dict):
        raise SettingsError("the settings must be a table of tables: {table: {key: value}}")
    data = {table: {k: v for k, v in kv.items() if v is not None}
            for table, kv in settings_dict(start.settings, written_depth=False).items()}
    for table, kv in values.items():
        if table not in _TABLES:
            settings_from_dict({table: kv})  # the loader's message for an unknown table
        if not isinstance(kv, dict):
            raise SettingsError(f"{table} must be a table: [{table}]")
        for key, value in kv.items():
            if key not in _TABLES[table]:
                settings_from_dict({table: {key: value}})  # the loader's message, with a suggestion
            value = _coerce(table, key, value)
            if value is None:
                if key in data[table]:
                    raise SettingsError(f"[{table}] {key} is set by {start.name}: a preset that extends it "
                                        "cannot leave it unset; give it a value")
                continue
            data[table][key] = value
    description, settings = settings_from_dict({"description": start.description, **data})
    return Preset(start.name, description, settings, start.path)


def differences(start: Preset, preset: Preset) -> dict[str, dict]:
    """The settings of ``preset`` that differ from ``start``'s, by table."""
    a = settings_dict(start.settings, written_depth=False)
    b = settings_dict(preset.settings, written_depth=False)
    return {table: {k: v for k, v in b[table].items() if v != a[table][k]} for table in b
            if any(v != a[table][k] for k, v in b[table].items())}


def extends_value(start: Preset, folder: Path) -> str:
    """What a preset saved in ``folder`` says it extends: a shipped preset by name, a
    preset file by its path from there."""
    if start.path is None or (start.name in shipped_names()
                              and Path(start.path).resolve() == (shipped_folder() / f"{start.name}.toml").resolve()):
        return start.name
    return Path(os.path.relpath(Path(start.path).resolve(), folder.resolve())).as_posix()


def preset_text(start: Preset, preset: Preset, folder: Path, description: str = "") -> str:
    """A preset file that extends ``start`` (as :func:`extends_value` names it from
    ``folder``, where the file will be) and holds only what differs, so that it loads back
    to ``preset``'s settings (the server checks that once it is written)."""
    lines = [f"extends = {_toml_value(extends_value(start, folder))}"]
    if description:
        lines.append(f"description = {_toml_value(description)}")
    for table, kv in differences(start, preset).items():
        lines += ["", f"[{table}]"] + [f"{k} = {_toml_value(v)}" for k, v in kv.items()]
    text = "\n".join(lines) + "\n"
    tomllib.loads(text)  # well-formed
    return text
