"""The brightness gate: render presets on images, hold each figure to its bounds.

``crtfilter check`` is a thin shell over :func:`run_check`; the bounds can also
come from a ``[tool.crtfilter.check]`` table in a ``pyproject.toml``.
"""

from __future__ import annotations

import dataclasses
import tempfile
import tomllib
import xml.etree.ElementTree as ET
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from .audit import REFERENCE_GREY, grey_field_contrast
from .charts import CHARTS, bundled_samples
from .errors import CrtfilterError, SettingsError, suggest
from .files import IMAGE_SUFFIXES, encode_png, write_atomic
from .job import render_file
from .presets import Preset, all_presets, load_preset

@dataclass(frozen=True)
class CheckSettings:
    """What to check and the bounds to hold.

    Parameters
    ----------
    presets : tuple of str
        Preset names or preset file paths; empty for every shipped preset.
    images : str or None
        Folder of images; None for the bundled samples plus generated charts.
    min_ratio, max_ratio : float
        Bounds of output / input mean luminance, measured from written files.
    min_contrast : float
        Lowest Michelson contrast (1st to 99th percentile) of linear luminance
        allowed on a uniform 18 % grey field.
    json, junit, maps : str or None
        Where to write the JSON figures, the JUnit XML, and energy maps (a folder).
    """

    presets: tuple[str, ...] = ()
    images: str | None = None
    min_ratio: float = 0.99
    max_ratio: float = 1.01
    min_contrast: float = 0.25
    json: str | None = None
    junit: str | None = None
    maps: str | None = None

    def __post_init__(self):
        for name in ("min_ratio", "max_ratio", "min_contrast"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not (0 <= value <= 10):
                raise SettingsError(f"{name} must be a number between 0 and 10 (got {value!r})")
        if self.min_ratio > self.max_ratio:
            raise SettingsError(f"min_ratio {self.min_ratio} is above max_ratio {self.max_ratio}")


def config_from_pyproject(folder: str | Path = ".") -> dict:
    """Read ``[tool.crtfilter.check]`` from ``folder/pyproject.toml`` ({} when absent).

    Relative paths in it are taken from that folder.

    Raises
    ------
    SettingsError
        For a TOML syntax error, an unknown key (with a suggestion) or a value
        of the wrong kind.
    """
    path = Path(folder) / "pyproject.toml"
    if not path.is_file():
        return {}
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise SettingsError(f"{path}: TOML syntax error: {exc}") from None
    table = data.get("tool", {}).get("crtfilter", {}).get("check", {})
    allowed = [f.name for f in dataclasses.fields(CheckSettings)]
    out = {}
    for key, value in table.items():
        if key not in allowed:
            raise SettingsError(f"{path}: [tool.crtfilter.check] unknown key {key!r}"
                                f"{suggest(key, allowed)}; allowed: {', '.join(allowed)}")
        if key == "presets":
            if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
                raise SettingsError(f"{path}: [tool.crtfilter.check] presets must be a list of names")
            value = tuple(v if not v.endswith(".toml") else str(path.parent / v) for v in value)
        elif key in ("images", "json", "junit", "maps"):
            if not isinstance(value, str):
                raise SettingsError(f"{path}: [tool.crtfilter.check] {key} must be text in quotes")
            value = str(path.parent / value)
        out[key] = value
    return out


@dataclass
class Case:
    """One figure held to its bounds."""

    preset: str
    image: str
    kind: str  # "light" or "contrast"
    value: float | None
    low: float | None
    high: float | None
    passed: bool
    local_p99: float | None = None
    contrast: float | None = None
    message: str = ""

    def as_dict(self) -> dict:
        return dataclasses.asdict(self)


@dataclass
class CheckResult:
    """Every case of a check run, and the settings it ran with."""

    settings: CheckSettings
    cases: list[Case] = field(default_factory=list)

    @property
    def failures(self) -> list[Case]:
        return [c for c in self.cases if not c.passed]

    @property
    def passed(self) -> bool:
        return not self.failures

    def as_dict(self) -> dict:
        return {"passed": self.passed, "bounds": {"min_ratio": self.settings.min_ratio,
                                                  "max_ratio": self.settings.max_ratio,
                                                  "min_contrast": self.settings.min_contrast},
                "cases": [c.as_dict() for c in self.cases]}


def resolve_presets(names: tuple[str, ...]) -> list[Preset]:
    """Load the named presets (all shipped ones when none is named)."""
    return [load_preset(n) for n in names] if names else all_presets()


def resolve_images(folder: str | None, workdir: Path) -> list[tuple[str, Path]]:
    """(label, path) of every image to check; charts are written into ``workdir``.

    Raises
    ------
    SettingsError
        For a missing folder or one without images.
    """
    if folder is not None:
        root = Path(folder)
        if not root.is_dir():
            raise SettingsError(f"{root}: no such folder")
        found = sorted(p for p in root.rglob("*") if p.is_file() and p.suffix.lower() in IMAGE_SUFFIXES)
        if not found:
            raise SettingsError(f"{root}: no images in this folder")
        return [(str(p.relative_to(root)), p) for p in found]
    images = [(p.name, p) for p in bundled_samples()]
    for label, draw in CHARTS.items():
        path = workdir / (label.replace(":", "-") + ".png")
        write_atomic(path, encode_png(draw()))
        images.append((label, path))
    return images


def run_check(settings: CheckSettings, *,
              on_case: Callable[[Case], None] | None = None) -> CheckResult:
    """Render every preset on every image and hold the figures to the bounds.

    Raises
    ------
    CrtfilterError
        For usage errors: an unknown preset, a missing folder.
    """
    presets = resolve_presets(settings.presets)
    result = CheckResult(settings)
    with tempfile.TemporaryDirectory(prefix="crtfilter-check-") as tmp:
        work = Path(tmp)
        images = resolve_images(settings.images, work)
        maps = Path(settings.maps) if settings.maps else None
        for preset in presets:
            contrast = grey_field_contrast(preset.settings)
            for label, path in images:
                stem = label.replace(":", "-").replace("/", "_").rsplit(".", 1)[0]
                dst = work / preset.name / f"{stem}.png"
                dst.parent.mkdir(exist_ok=True)
                map_path = maps / preset.name / f"{stem}-energy.png" if maps else None
                if map_path:
                    map_path.parent.mkdir(parents=True, exist_ok=True)
                case = Case(preset.name, label, "light", None, settings.min_ratio, settings.max_ratio,
                            False, contrast=contrast)
                try:
                    report = render_file(path, dst, preset=preset, force=True, energy_map=map_path)
                except CrtfilterError as exc:
                    case.message = str(exc)
                else:
                    ratio = report["luminance"]["ratio"]
                    case.value, case.local_p99 = ratio, report["local"]["p99"]
                    if ratio is None:  # a black image holds no light to lose
                        case.passed, case.message = True, "black input: no light to hold"
                    else:
                        case.passed = settings.min_ratio <= ratio <= settings.max_ratio
                        if not case.passed:
                            case.message = (f"light kept {ratio:.4f} is outside "
                                            f"[{settings.min_ratio}, {settings.max_ratio}]")
                    dst.unlink()
                result.cases.append(case)
                if on_case:
                    on_case(case)
            case = Case(preset.name, f"uniform {REFERENCE_GREY:.0%} grey", "contrast", contrast,
                        settings.min_contrast, None, contrast >= settings.min_contrast, contrast=contrast)
            if not case.passed:
                case.message = (f"mask contrast {contrast:.3f} at {REFERENCE_GREY:.0%} grey is below "
                                f"{settings.min_contrast}")
            result.cases.append(case)
            if on_case:
                on_case(case)
    return result


def junit_xml(result: CheckResult) -> bytes:
    """The result as JUnit XML: one testcase per preset and image, one per preset for contrast."""
    suite = ET.Element("testsuite", name="crtfilter check", tests=str(len(result.cases)),
                       failures=str(len(result.failures)), errors="0")
    for case in result.cases:
        name = (f"{case.image}: light kept" if case.kind == "light"
                else f"mask contrast at {REFERENCE_GREY:.0%} grey")
        tc = ET.SubElement(suite, "testcase", classname=f"crtfilter.{case.preset}", name=name)
        value = "none" if case.value is None else f"{case.value:.6f}"
        bound = (f"[{case.low}, {case.high}]" if case.kind == "light" else f">= {case.low}")
        ET.SubElement(tc, "system-out").text = f"measured {value}; bound {bound}"
        if not case.passed:
            failure = ET.SubElement(tc, "failure", message=case.message or f"measured {value}, bound {bound}",
                                    type="bound")
            failure.text = f"preset {case.preset}, image {case.image}: measured {value}, bound {bound}"
    root = ET.Element("testsuites", tests=suite.get("tests"), failures=suite.get("failures"))
    root.append(suite)
    ET.indent(root)
    return ET.tostring(root, encoding="utf-8", xml_declaration=True) + b"\n"
