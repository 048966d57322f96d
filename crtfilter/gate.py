"""The brightness gate: render presets on images, hold each figure to its bounds.

``crtfilter check`` is a thin shell over :func:`run_check`; the bounds can also
come from a ``[tool.crtfilter.check]`` table in a ``pyproject.toml``.
"""

from __future__ import annotations

import dataclasses
import tempfile
import xml.etree.ElementTree as ET
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from .audit import REFERENCE_GREY, mask_contrast
from .charts import CHARTS, bundled_samples
from .errors import CrtfilterError, SettingsError, suggest
from .files import encode_png, write_atomic
from .job import images_in, render_file
from .presets import Preset, all_presets, load_preset
from .writes import WritePlan, slug, unique_names

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


#: Largest pyproject.toml read by ``check``.
MAX_PYPROJECT_BYTES = 8 << 20


def _shown(value) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def config_from_pyproject(folder: str | Path = ".") -> dict:
    """Read ``[tool.crtfilter.check]`` from ``folder/pyproject.toml`` ({} when absent).

    Relative paths in it are taken from that folder. Only a regular file of at
    most :data:`MAX_PYPROJECT_BYTES` is read (a FIFO or a device is refused
    without blocking).

    Raises
    ------
    CrtfilterError
        One line naming the file: for a file that is not a regular file, not
        UTF-8 or not TOML (with line and column), ``tool``, ``tool.crtfilter``
        or ``tool.crtfilter.check`` that is not a table, an unknown key (with
        a suggestion), a value of the wrong kind or out of range.
    """
    from .files import read_regular
    from .presets import parse_toml

    path = Path(folder) / "pyproject.toml"
    if not path.exists():
        return {}
    data = parse_toml(path, read_regular(path, MAX_PYPROJECT_BYTES, what="pyproject.toml"))
    table = data
    for name in ("tool", "tool.crtfilter", "tool.crtfilter.check"):
        table = table.get(name.rsplit(".", 1)[-1], {})
        if not isinstance(table, dict):
            raise SettingsError(f"{path}: {name} must be a table ([{name}]), not {_shown(table)}")
        if name == "tool.crtfilter":
            for key in table:
                if key != "check":
                    raise SettingsError(f"{path}: [tool.crtfilter] unknown key {key!r}"
                                        f"{suggest(key, ['check'])}; allowed: [tool.crtfilter.check]")
    allowed = [f.name for f in dataclasses.fields(CheckSettings)]
    out = {}
    for key, value in table.items():
        if key not in allowed:
            raise SettingsError(f"{path}: [tool.crtfilter.check] unknown key {key!r}"
                                f"{suggest(key, allowed)}; allowed: {', '.join(allowed)}")
        if key == "presets":
            if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
                raise SettingsError(f"{path}: [tool.crtfilter.check] presets must be a list of names "
                                    f"(got {_shown(value)})")
            value = tuple(v if not v.endswith(".toml") else str(path.parent / v) for v in value)
        elif key in ("images", "json", "junit", "maps"):
            if not isinstance(value, str):
                raise SettingsError(f"{path}: [tool.crtfilter.check] {key} must be text in quotes "
                                    f"(got {_shown(value)})")
            value = str(path.parent / value)
        out[key] = value
    try:
        CheckSettings(**out)  # the numbers: kind and range, as the check itself holds them
    except SettingsError as exc:
        raise SettingsError(f"{path}: [tool.crtfilter.check] {exc}") from None
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


def resolve_images(folder: str | None, workdir: Path, *, leave_out: Path | None = None) -> list[tuple[str, Path]]:
    """(label, path) of every image to check; charts are written into ``workdir``.

    Files below ``leave_out`` (the energy-map folder, when it lies inside the
    images) are not images to check: an earlier run wrote them.

    Raises
    ------
    SettingsError
        For a missing file or folder, or a folder without images.
    """
    if folder is not None:
        root = Path(folder)
        found = images_in(root, leave_out, clips=True)
        return [(str(p.relative_to(root)) if p != root else p.name, p) for p in found]
    images = [(p.name, p) for p in bundled_samples()]
    for label, draw in CHARTS.items():
        path = workdir / (label.replace(":", "-") + ".png")
        write_atomic(path, encode_png(draw()))
        images.append((label, path))
    return images


def _moves(path: Path) -> bool:
    """Whether an image to check is a clip (a file that cannot be read is not: its render says why)."""
    from .clips import probe

    try:
        return probe(path) is not None
    except CrtfilterError:
        return False


def run_check(settings: CheckSettings, *, writes: WritePlan | None = None,
              on_case: Callable[[Case], None] | None = None, cluster=None) -> CheckResult:
    """Render every preset on every image and hold the figures to the bounds.

    Every file the check will leave behind (the JSON and JUnit reports, each
    energy map) is planned in ``writes`` before any work, against the images
    and each other; the caller writes the two reports through it afterwards.
    With ``cluster`` (a Dask client, :func:`crtfilter.cluster.connect`) each
    preset's images are rendered on its workers, as ``render --cluster`` does.

    Raises
    ------
    CrtfilterError
        For usage errors: an unknown preset, a missing folder.
    """
    presets = resolve_presets(settings.presets)
    result = CheckResult(settings)
    writes = writes if writes is not None else WritePlan()
    with tempfile.TemporaryDirectory(prefix="crtfilter-check-") as tmp:
        work = Path(tmp)
        maps = Path(settings.maps) if settings.maps else None
        images = resolve_images(settings.images, work, leave_out=maps)
        writes.protect(*(path for _label, path in images))
        for path, what in ((settings.json, "JSON report"), (settings.junit, "JUnit report")):
            if path:
                writes.add(path, what)
        folders = unique_names([p.name for p in presets])
        # named by their labels: a chart's path is in a temporary folder, so its place there is no name
        stems = unique_names([slug(str(Path(label).with_suffix(""))) for label, _path in images])
        if maps:
            writes.add_folder(maps, "energy-map folder")
            for preset, folder in zip(presets, folders, strict=True):
                for (label, _path), stem in zip(images, stems, strict=True):
                    writes.add(maps / folder / f"{stem}-energy.png", f"energy map of {preset.name} on {label}")
        for preset, folder in zip(presets, folders, strict=True):
            contrast = mask_contrast(preset.settings)
            cases = []
            for n, ((label, path), stem) in enumerate(zip(images, stems, strict=True)):
                moving = settings.images is not None and _moves(path)
                dst = work / folder / f"{stem}.{'mkv' if moving else 'png'}"
                dst.parent.mkdir(exist_ok=True)
                map_path = maps / folder / f"{stem}-energy.png" if maps and not moving else None
                cases.append((n, path, dst, map_path, label))
            rendered = (_on_cluster(cluster, cases, preset, writes.force) if cluster is not None else
                        _here(cases, preset, writes.force))
            for (n, path, dst, map_path, label), (report, error) in zip(cases, rendered, strict=True):
                # a preset that holds a share of the light is measured against that share
                target = preset.settings.encoding.gain
                low, high = settings.min_ratio * target, settings.max_ratio * target
                case = Case(preset.name, label, "light", None, low, high, False, contrast=contrast)
                if error is not None:
                    case.message = error
                else:
                    lum = report["luminance"]
                    ratio = lum["ratio"]
                    if "clip" in report:  # a clip: its frame furthest from the target
                        ratio = max((r for r in (lum["ratio_min"], lum["ratio_max"]) if r is not None),
                                    key=lambda r: abs(r / target - 1), default=None)
                    case.value, case.local_p99 = ratio, report.get("local", {}).get("p99")
                    if ratio is None:  # a black image holds no light to lose
                        case.passed, case.message = True, "black input: no light to hold"
                    else:
                        case.passed = low <= ratio <= high
                        if not case.passed:
                            bounds = f"[{settings.min_ratio}, {settings.max_ratio}]"
                            if target != 1.0:
                                bounds = f"[{low:.4g}, {high:.4g}] (its target {target:g} times {bounds})"
                            case.message = f"light kept {ratio:.4f} is outside {bounds}"
                    dst.unlink(missing_ok=True)
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


def _here(cases, preset: Preset, force: bool):
    """Render each case in this process, one after another: (report, None) or (None, error)."""
    for _n, path, dst, map_path, _label in cases:
        try:
            yield render_file(path, dst, preset=preset, force=force, energy_map=map_path), None
        except CrtfilterError as exc:
            yield None, str(exc)


def _on_cluster(cluster, cases, preset: Preset, force: bool) -> list:
    """Render the cases on a cluster's workers; the outcomes in the cases' order."""
    from . import cluster as on_cluster
    from .job import BatchResult, kernels_for

    work = [(n, path, dst, map_path) for n, path, dst, map_path, _label in cases]
    got: dict = {}
    result = BatchResult()
    on_cluster.warm(cluster, kernels_for([path for _n, path, _dst, _map in work], preset))
    on_cluster.run_batch(cluster, work, {"preset": preset, "force": force}, lambda src, report, error:
                         got.setdefault(src, (report, error)), result, {"asked": False})
    if result.interrupted:
        raise KeyboardInterrupt
    return [got[path] for _n, path, _dst, _map in work]


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
