"""Preset files: load, validate, list.

A preset is a TOML file with a ``description`` and up to four tables, each
feeding one stage's settings; the keys are the settings' own field names:

    description = "..."
    extends = "other"   (optional: a shipped preset or a file beside this one)
    [source]   transfer, alpha, primaries, white, white_adaptation, pixel_aspect,
               display_aspect, crop, line_doubled, overscan
    [output]   fit, size, scale, whole_scale, kernel, depth, dither, rounding, range,
               peak, reference_white
    [mask]     phosphor, triad_pitch, order, phosphor_fill, slot_height,
               slot_gap, dot_row_height, phosphor_strength, scanlines,
               beam_width, scanline_strength, orientation
    [tone]     curve, softness, slope, balance_tiles, light_share
    [glow]     share, radius

Anything left out takes the stage's default. Shipped presets live in the
package (``crtfilter/presets/*.toml`` once installed, ``presets/`` in a checkout).
"""

from __future__ import annotations

import dataclasses
import json
import numbers
import os
import tomllib
from dataclasses import dataclass, fields
from functools import lru_cache
from pathlib import Path

from . import DEFAULT_PRESET
from .capture import CaptureSettings
from .color import DecodeSettings
from .errors import CrtfilterError, SettingsError, suggest
from .files import MAX_PRESET_BYTES, data_folder, read_regular
from .glow import GlowSettings
from .masks import MaskSettings
from .plan import Settings
from .scale import GeometrySettings
from .tone import ToneSettings


# table -> {key: (stage, field)}; stage None means a field of Settings itself.
_TABLES: dict[str, dict[str, tuple[str | None, str]]] = {
    "source": {"transfer": ("decode", "transfer"), "alpha": ("decode", "alpha"),
               "primaries": ("decode", "primaries"), "white": ("decode", "white"),
               "white_adaptation": ("decode", "white_adaptation"),
               "pixel_aspect": ("geometry", "pixel_aspect"),
               "display_aspect": ("geometry", "display_aspect"),
               "crop": ("capture", "crop"), "line_doubled": ("capture", "line_doubled"),
               "overscan": ("capture", "overscan")},
    "output": {"fit": ("geometry", "fit"), "size": ("geometry", "size"),
               "scale": ("geometry", "scale"), "whole_scale": ("geometry", "whole_scale"),
               "kernel": (None, "kernel"), "depth": (None, "depth"), "dither": (None, "dither"),
               "rounding": (None, "rounding"), "range": (None, "output_range"), "peak": (None, "peak"),
               "reference_white": (None, "reference_white")},
    "mask": {f.name: ("mask", f.name) for f in fields(MaskSettings)},
    "tone": {f.name: ("tone", f.name) for f in fields(ToneSettings)},
    "glow": {f.name: ("glow", f.name) for f in fields(GlowSettings)},
}
_STAGES = {"decode": DecodeSettings, "geometry": GeometrySettings, "mask": MaskSettings,
           "tone": ToneSettings, "capture": CaptureSettings, "glow": GlowSettings}


@dataclass(frozen=True)
class Preset:
    """A named, validated set of settings."""

    name: str
    description: str
    settings: Settings
    path: Path | None = None
    options: tuple[tuple[str, object], ...] = ()
    """The options laid over the file's settings by :meth:`with_options`, as (name, value)."""

    def with_options(self, *, size: str | tuple[int, int] | None = None, scale: float | None = None,
                     pixel_aspect: str | None = None, display_aspect: str | None = None,
                     transfer: str | None = None, alpha: str | None = None,
                     primaries: str | None = None, white: str | None = None,
                     depth: int | None = None, dither: str | None = None,
                     output_range: str | None = None, peak: float | None = None,
                     reference_white: float | None = None, kernel: str | None = None,
                     whole_scale: bool | None = None, phosphor: str | None = None,
                     triad_pitch: float | None = None, scanline_strength: float | None = None,
                     beam_width: float | None = None, softness: float | None = None,
                     crop: str | None = None, line_doubled: bool | None = None,
                     overscan: float | None = None, rounding: str | None = None,
                     light_share: float | None = None, glow_share: float | None = None,
                     glow_radius: float | None = None) -> Preset:
        """Return a copy with command-line choices laid over the preset's settings.

        ``size`` (``"WxH"`` or a (width, height) tuple) or ``scale`` replaces
        both of the preset's size and scale (both
        together: that scale, centred in that size); ``pixel_aspect`` replaces a
        preset's display aspect too; ``whole_scale=False`` fills the box at a
        fractional scale. The others replace the setting of the same name
        (``kernel``; ``phosphor``, ``triad_pitch``, ``scanline_strength``,
        ``beam_width`` of the mask, a scanline strength above 0 turning scanlines on
        and 0 turning them off; ``softness`` and ``light_share`` of the tone curves; ``crop``,
        ``line_doubled``, ``overscan`` of the capture; ``rounding``, see
        :mod:`crtfilter.rounding`; ``glow_share``, ``glow_radius``: the ``[glow]``
        table, see :mod:`crtfilter.glow`). Options left at None keep the preset's value.

        Raises
        ------
        SettingsError
            For both aspects at once, or a value the stage refuses.
        """
        locals_given = dict(locals())
        del locals_given["self"]
        if pixel_aspect is not None and display_aspect is not None:
            raise SettingsError("give the pixel aspect or the display aspect, not both: "
                                "each sets the shape of the source pixels")
        s = self.settings

        def given(**values):
            return {k: v for k, v in values.items() if v is not None}

        geo = s.geometry
        size = size_text(size)
        if size is not None or scale is not None:
            geo = dataclasses.replace(geo, size=size, scale=scale)
        if pixel_aspect is not None:
            geo = dataclasses.replace(geo, pixel_aspect=pixel_aspect, display_aspect=None)
        geo = dataclasses.replace(geo, **given(display_aspect=display_aspect, whole_scale=whole_scale))
        stages = {
            "geometry": geo,
            "decode": dataclasses.replace(s.decode, **given(transfer=transfer, alpha=alpha, primaries=primaries,
                                                             white=white)),
            # a scanline strength turns the scanlines on, or off at 0
            "mask": dataclasses.replace(s.mask, **given(phosphor=phosphor, triad_pitch=triad_pitch,
                                                         scanline_strength=scanline_strength,
                                                         beam_width=beam_width,
                                                         scanlines=None if scanline_strength is None
                                                         else scanline_strength > 0)),
            "tone": dataclasses.replace(s.tone, **given(softness=softness, light_share=light_share)),
            "capture": dataclasses.replace(s.capture, **given(crop=crop, line_doubled=line_doubled,
                                                               overscan=overscan)),
            "glow": dataclasses.replace(s.glow, **given(share=glow_share, radius=glow_radius)),
        }
        top = given(depth=depth, dither=dither, output_range=output_range, peak=peak,
                    reference_white=reference_white, kernel=kernel, rounding=rounding)
        settings = dataclasses.replace(s, **stages, **top)
        laid = {k: v for k, v in locals_given.items() if v is not None}
        if settings == s:
            return self
        merged = {**dict(self.options), **laid}
        return dataclasses.replace(self, settings=settings, options=tuple(merged.items()))


def size_text(size) -> str | None:
    """A size as settings hold it, ``"WxH"``, from that text or a (width, height) pair.

    >>> size_text((2880, 2160))
    '2880x2160'
    >>> size_text("1920x1080")
    '1920x1080'
    """
    if size is None or isinstance(size, str):
        return size
    try:
        width, height = size
    except (TypeError, ValueError):
        raise SettingsError(f"size must be 'WxH' text or a (width, height) pair (got {size!r})") from None
    if not all(isinstance(v, numbers.Integral) and not isinstance(v, bool) for v in (width, height)):
        raise SettingsError(f"size must be whole numbers of pixels (got {size!r})")
    return f"{int(width)}x{int(height)}"


def _field_kind(stage_cls, name: str) -> str:
    """'bool', 'number' or 'text', from the settings field's annotation."""
    annotation = str(next(f.type for f in fields(stage_cls) if f.name == name))
    if "bool" in annotation:
        return "bool"
    if "float" in annotation or "int" in annotation:
        return "number"
    return "text"


def _check_type(where: str, key: str, value, kind: str):
    """Refuse a value of the wrong kind, saying which kind is wanted."""
    is_number = isinstance(value, (int, float)) and not isinstance(value, bool)
    ok, want = {
        "bool": (isinstance(value, bool), "true or false"),
        "number": (is_number, "a number"),
        "text": (isinstance(value, str), "text in quotes"),
    }[kind]
    if not ok:
        raise SettingsError(f"{where}{key} must be {want} (got {value!r})")


def settings_from_dict(data: dict, where: str = "") -> tuple[str, Settings]:
    """Validate a preset's parsed TOML and build its settings.

    Parameters
    ----------
    data : dict
        The parsed file.
    where : str
        Prefix for messages (the file name and a colon).

    Returns
    -------
    description : str
    settings : Settings

    Raises
    ------
    SettingsError
        Naming the file, the table, the key and what is allowed.

    Examples
    --------
    >>> description, settings = settings_from_dict({"mask": {"phosphor": "dots"}})
    >>> settings.mask.phosphor, settings.kernel
    ('dots', 'sharp')
    """
    data = dict(data)
    description = data.pop("description", "")
    if not isinstance(description, str):
        raise SettingsError(f"{where}description must be text in quotes")
    stage_values: dict[str, dict] = {name: {} for name in _STAGES}
    top: dict = {}
    for table, values in data.items():
        if table not in _TABLES:
            raise SettingsError(
                f"{where}unknown table or key {table!r}{suggest(table, list(_TABLES) + ['description'])}; "
                f"allowed: description, {', '.join(f'[{t}]' for t in _TABLES)}"
            )
        if not isinstance(values, dict):
            raise SettingsError(f"{where}{table} must be a table: [{table}]")
        keys = _TABLES[table]
        for key, value in values.items():
            if key not in keys:
                raise SettingsError(
                    f"{where}[{table}] unknown key {key!r}{suggest(key, keys)}; "
                    f"allowed: {', '.join(keys)}"
                )
            stage, name = keys[key]
            kind = _field_kind(_STAGES[stage] if stage else Settings, name)
            _check_type(f"{where}[{table}] ", key, value, kind)
            (stage_values[stage] if stage else top)[name] = value
    stages = {}
    for name, cls in _STAGES.items():
        try:
            stages[name] = cls(**stage_values[name])
        except SettingsError as exc:
            table = {"mask": "[mask] ", "tone": "[tone] ", "capture": "[source] ", "glow": "[glow] "}.get(name, "")
            raise SettingsError(f"{where}{table}{exc}") from None
    try:
        settings = Settings(**stages, **top)
    except SettingsError as exc:
        raise SettingsError(f"{where}[output] {exc}") from None
    return description, settings


def shipped_folder() -> Path:
    """Return the folder holding the shipped preset files."""
    return data_folder("presets", "*.toml")


@lru_cache(maxsize=1)
def shipped_names() -> tuple[str, ...]:
    """Names of the shipped presets, sorted.

    Examples
    --------
    >>> "aperture-fine-within-4k" in shipped_names()
    True
    """
    return tuple(sorted(p.stem for p in shipped_folder().glob("*.toml")))


def _read_toml(path: Path) -> dict:
    """A preset file's TOML: only a regular file of at most MAX_PRESET_BYTES, opened so
    that a FIFO or a device never blocks; every failure one line naming the file."""
    data = read_regular(path, MAX_PRESET_BYTES, what="preset file", noun="a preset file",
                        missing="no such preset file", missing_error=SettingsError)
    return parse_toml(path, data)


def parse_toml(path: Path, data: bytes) -> dict:
    """TOML from a file's bytes; a SettingsError naming the file for text that is not
    UTF-8, a syntax error, or nesting too deep to read."""
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise SettingsError(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SettingsError(f"{path}: TOML syntax error: {exc}") from None
    except RecursionError:  # tomllib reads nested arrays and inline tables recursively
        raise SettingsError(f"{path}: arrays or tables nested too deeply to read") from None


#: Names presets had before they said "within": the box is the most a picture gets, not its size.
RENAMED = {old: old.rsplit("-", 1)[0] + "-within-" + old.rsplit("-", 1)[1] for old in (
    "aperture-coarse-4k", "aperture-fine-1080p", "aperture-fine-4k", "aperture-hdr-4k",
    "aperture-rotated-4k", "aperture-soft-4k", "dots-fine-4k", "scanlines-only-1080p",
    "slot-coarse-1080p", "slot-medium-4k")}


def _unknown(name: str, names) -> str:
    """The end of an unknown-preset message: the new name of a renamed one, or the closest."""
    if name in RENAMED:
        return (f": it was renamed {RENAMED[name]!r} (its picture is whole-scaled to fit within that size, "
                "not made that size)")
    return suggest(name, names)


def _base_path(parent: Path, name) -> Path:
    """Where an ``extends`` value points: a file beside ``parent``, or a shipped preset."""
    if not isinstance(name, str) or not name:
        raise SettingsError(f"{parent}: extends must name a preset (got {name!r})")
    beside = parent.parent / name
    if name.endswith(".toml"):
        return beside
    if (parent.parent / f"{name}.toml").exists():  # any kind of file: the reader refuses what is not regular
        return parent.parent / f"{name}.toml"
    if os.sep in name or (os.altsep or os.sep) in name:  # a path, never a shipped name
        return beside
    names = shipped_names()
    if name not in names:
        raise SettingsError(f"{parent}: extends unknown preset {name!r}{_unknown(name, names)}")
    return shipped_folder() / f"{name}.toml"


def _merged(path: Path, chain: tuple[Path, ...] = ()) -> dict:
    """The preset file's data with everything it ``extends`` laid underneath."""
    key = path.resolve()
    if key in chain:
        loop = " -> ".join(p.name for p in chain + (key,))
        raise SettingsError(f"{path}: extends goes round in a circle: {loop}")
    data = _read_toml(path)
    base_name = data.pop("extends", None)
    if base_name is None:
        return data
    base = _merged(_base_path(path, base_name), chain + (key,))
    for table, values in data.items():
        if isinstance(values, dict) and isinstance(base.get(table), dict):
            base[table] = {**base[table], **values}
        else:
            base[table] = values
    return base


def load_preset_file(path: str | Path, name: str | None = None) -> Preset:
    """Read and validate one preset file, and what it ``extends``.

    A preset may say ``extends = "name"`` (a shipped preset, or a file of that
    name beside it) or ``extends = "other.toml"``; its own keys then override
    the base's, table by table.

    Raises
    ------
    SettingsError
        For a missing file, a TOML syntax error (with line and column), a
        circle of ``extends``, or an invalid value (naming the file and key).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "wide.toml"
    >>> lines = ['extends = "slot-medium-within-4k"', "[mask]", "slot_gap = 0.3"]
    >>> _ = path.write_text(chr(10).join(lines))
    >>> load_preset_file(path).settings.mask.slot_gap
    0.3
    """
    path = Path(path)
    description, settings = settings_from_dict(_merged(path), f"{path}: ")
    return Preset(name or path.stem, description, settings, path)


def load_preset(name_or_path: str | Path | None = None) -> Preset:
    """Return a shipped preset by name, or a preset file by path.

    ``None`` gives :data:`DEFAULT_PRESET`. A string that names an existing file,
    or ends in ``.toml``, is read as a path.

    Examples
    --------
    >>> load_preset("slot-medium-within-4k").settings.mask.phosphor
    'slot'
    >>> load_preset("slot")
    Traceback (most recent call last):
    ...
    crtfilter.errors.SettingsError: unknown preset 'slot'; did you mean 'slot-coarse-within-1080p' or 'slot-medium-within-4k'? ('crtfilter presets' lists them)
    """
    if isinstance(name_or_path, Preset):
        return name_or_path
    if name_or_path is None:
        name_or_path = DEFAULT_PRESET
    text = str(name_or_path)
    candidate = Path(text)
    # a path (it ends in .toml, names a folder on the way, or is there and no folder) is
    # read as a file, and refused with the reason when it is not a regular one
    looks_like_path = text.endswith(".toml") or os.sep in text or (os.altsep or os.sep) in text
    if looks_like_path or (candidate.exists() and not candidate.is_dir()):
        return load_preset_file(candidate)
    names = shipped_names()
    if text not in names:
        raise SettingsError(
            f"unknown preset {text!r}{_unknown(text, names)} "
            f"('crtfilter presets' lists them)"
        )
    return load_preset_file(shipped_folder() / f"{text}.toml", text)


def all_presets() -> list[Preset]:
    """Every shipped preset, loaded and validated, sorted by name.

    Examples
    --------
    >>> [p.name for p in all_presets()] == list(shipped_names())
    True
    """
    return [load_preset(n) for n in shipped_names()]


def settings_dict(settings: Settings, *, written_depth: bool = True) -> dict:
    """The resolved settings as plain data, grouped by preset table.

    ``output.depth`` is the depth written (16 for HDR whatever the preset says), or
    with ``written_depth=False`` the setting itself.

    Examples
    --------
    >>> settings_dict(load_preset("aperture-fine-within-4k").settings)["mask"]["triad_pitch"]
    3.0
    """
    out: dict[str, dict] = {}
    for table, keys in _TABLES.items():
        out[table] = {}
        for key, (stage, name) in keys.items():
            source = getattr(settings, stage) if stage else settings
            out[table][key] = getattr(source, "output_depth" if name == "depth" and written_depth else name)
    return out


#: What an unset setting means, for the comment that stands in for it in preset_toml.
_UNSET = {
    "display_aspect": "not set: the pixel aspect gives the shape",
    "size": "not set: the output is just the picture, fitted into fit",
    "scale": "not set: the largest scale that fits",
    "crop": "not set: the whole frame",
    "slope": "not set: the softness decides the slope",
}


def _toml_value(value) -> str:
    """A setting's value in TOML (JSON's strings, numbers and booleans are TOML's too)."""
    return json.dumps(value, ensure_ascii=False)


def preset_toml(preset: Preset, notes: list[str] | None = None) -> str:
    """A preset as a TOML file that loads back to the same settings: every resolved setting
    (what ``extends`` brought in too), an unset one as a comment saying what that means,
    and ``notes`` as comments at the end.

    Examples
    --------
    >>> import tomllib
    >>> p = load_preset("slot-medium-within-4k")
    >>> text = preset_toml(p)
    >>> settings_from_dict(tomllib.loads(text))[1] == p.settings
    True
    """
    lines = [f"# {preset.name}, every setting resolved", f"description = {_toml_value(preset.description)}"]
    for table, values in settings_dict(preset.settings, written_depth=False).items():
        lines += ["", f"[{table}]"]
        for key, value in values.items():
            lines.append(f"# {key} is {_UNSET.get(key, 'not set')}" if value is None
                         else f"{key} = {_toml_value(value)}")
    if notes:
        lines += [""] + [f"# {n}" for n in notes]
    return "\n".join(lines) + "\n"


__all__ = [
    "DEFAULT_PRESET", "Preset", "load_preset", "load_preset_file", "all_presets",
    "shipped_names", "settings_dict", "settings_from_dict", "preset_toml", "CrtfilterError",
]


def settings_from_record(record: dict) -> Settings:
    """Rebuild settings from :func:`settings_dict`'s data (as a rendered file records it)."""
    data = {table: {k: v for k, v in values.items() if v is not None} for table, values in record.items()}
    return settings_from_dict(data, "recorded settings: ")[1]


def diff_presets(a: Preset, b: Preset) -> dict:
    """What differs between two presets' resolved settings, and what it does to the mask.

    Returns
    -------
    dict
        ``a``, ``b`` (names), ``settings``: a list of ``{"key": "table.key",
        "a": ..., "b": ...}`` for every resolved setting that differs, and
        ``figures``: mask mean, slope, curve degree and contrast at 18 % grey of
        each, for a 320x240 source.
    """
    from .audit import preset_figures

    da, db = settings_dict(a.settings), settings_dict(b.settings)
    changed = [{"key": f"{table}.{key}", "a": da[table][key], "b": db[table][key]}
               for table in da for key in da[table] if da[table][key] != db[table][key]]
    fa, fb = preset_figures(a.settings), preset_figures(b.settings)
    figures = {name: {"a": fa[name], "b": fb[name]}
               for name in ("output", "mask_mean", "slope", "degree", "contrast", "contrast_green")}
    return {"a": a.name, "b": b.name, "settings": changed, "figures": figures}
