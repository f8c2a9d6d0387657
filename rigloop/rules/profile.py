"""Rig profiles: what a type of rig can present, sense and deliver.

A profile (TOML in ``rig_profiles/``) names the cues the rig offers, its response
channels and choice sides, its serial settings, and the reward valve's calibration:
points (open time in ms, volume in µL) fitted by least squares to a line
ul = intercept + slope * ms, which ``valve_ms`` inverts to send open times.

``valve_ms`` does not extrapolate: a volume outside the calibrated range is an error
(``BadArgument``), because a valve line is only trusted where it was measured;
``Rules.check_profile`` reports such volumes before a session starts.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import BadArgument, RuleError
from .expr import fmt

PARITIES = ("none", "even", "odd")
LINE_ENDINGS = ("lf", "crlf", "cr")
MAX_RESIDUAL = 0.10  # largest relative misfit of one calibration point to the line


@dataclass(frozen=True, slots=True)
class SerialSettings:
    port: str
    baud: int = 115200
    data_bits: int = 8
    parity: str = "none"
    stop_bits: int = 1
    timeout_s: float = 0.5
    line_ending: str = "lf"


@dataclass(frozen=True, slots=True)
class RigProfile:
    """One rig type. ``points``: calibration (ms, µL); ``intercept``/``slope`` the fit."""

    name: str
    kind: str
    description: str
    cues: tuple[str, ...]
    responses: tuple[str, ...]
    sides: tuple[str, ...]
    serial: SerialSettings
    points: tuple[tuple[float, float], ...]
    intercept: float
    slope: float
    source: str = "<string>"

    @property
    def ul_range(self) -> tuple[float, float]:
        uls = [u for _, u in self.points]
        return min(uls), max(uls)

    def ul_for_ms(self, ms: float) -> float:
        # ul = intercept + slope * ms
        return self.intercept + self.slope * float(ms)

    def valve_ms(self, ul: float) -> float:
        """Valve open time (ms) that delivers ``ul`` µL; 0 µL is 0 ms.

        Raises BadArgument for a volume outside the calibrated range.
        """
        ul = float(ul)
        if ul == 0.0:
            return 0.0
        lo, hi = self.ul_range
        if not math.isfinite(ul) or ul < lo - 1e-9 or ul > hi + 1e-9:
            raise BadArgument(
                "reward_ul", f"a volume within the valve calibration of rig profile {self.name!r} "
                f"({fmt(lo)} to {fmt(hi)} µL)", ul)
        # ms = (ul - intercept) / slope
        return (ul - self.intercept) / self.slope


def fit_line(points: list[tuple[float, float]]) -> tuple[float, float]:
    """Least-squares line y = a + b x through (x, y) points: returns (a, b).

    b = Σ(x - x̄)(y - ȳ) / Σ(x - x̄)²;  a = ȳ - b x̄
    """
    n = len(points)
    mx = sum(x for x, _ in points) / n
    my = sum(y for _, y in points) / n
    sxx = sum((x - mx) ** 2 for x, _ in points)
    sxy = sum((x - mx) * (y - my) for x, y in points)
    b = sxy / sxx
    return my - b * mx, b


TOP_KEYS = ["name", "kind", "description", "cues", "responses", "sides", "serial", "valve"]


def parse_profile(text: str, source: str = "<string>") -> RigProfile:
    """Validate a profile's TOML text; raise RuleError listing every problem."""
    try:
        d = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise RuleError([f"not valid TOML: {err}"], source) from None
    problems: list[str] = []
    add = problems.append
    for k in d:
        if k not in TOP_KEYS:
            add(f"{k}: unknown key (allowed: {', '.join(TOP_KEYS)})")

    def text_of(key: str, default: str | None = None) -> str:
        v = d.get(key, default)
        if not isinstance(v, str) or not v:
            add(f"{key}: must be a non-empty string (got {v!r})")
            return ""
        return v

    def names(key: str, required: bool = True) -> tuple[str, ...]:
        v = d.get(key, [] if not required else None)
        if not isinstance(v, list) or not all(isinstance(x, str) and x.isidentifier() for x in v):
            add(f"{key}: must be a list of plain names (got {v!r})")
            return ()
        if required and not v:
            add(f"{key}: list at least one")
        if len(set(v)) != len(v):
            add(f"{key}: names a value twice")
        return tuple(v)

    name, kind, desc = text_of("name"), text_of("kind"), d.get("description", "")
    cues, responses, sides = names("cues"), names("responses"), names("sides", required=False)
    for s in sides:
        if s not in ("left", "right"):
            add(f"sides: '{s}' is not a side (left, right)")
    serial = _serial(d.get("serial"), add)
    points, a, b = _valve(d.get("valve"), add)
    if problems:
        raise RuleError(problems, source)
    return RigProfile(name, kind, str(desc), cues, responses, sides, serial, points, a, b, source)


def _serial(t: Any, add) -> SerialSettings:
    if not isinstance(t, dict):
        add("serial: is missing (a table with port, baud, ...)")
        return SerialSettings("")
    allowed = ["port", "baud", "data_bits", "parity", "stop_bits", "timeout_s", "line_ending"]
    for k in t:
        if k not in allowed:
            add(f"serial.{k}: unknown key (allowed: {', '.join(allowed)})")
    port = t.get("port")
    if not isinstance(port, str) or not port:
        add(f"serial.port: must be a device path string (got {port!r})")
        port = ""
    baud = t.get("baud", 115200)
    if baud not in (9600, 19200, 38400, 57600, 115200, 230400, 460800, 921600):
        add(f"serial.baud: must be a standard rate such as 9600 or 115200 (got {baud!r})")
        baud = 115200
    bits = t.get("data_bits", 8)
    if bits not in (7, 8):
        add(f"serial.data_bits: must be 7 or 8 (got {bits!r})")
    parity = t.get("parity", "none")
    if parity not in PARITIES:
        add(f"serial.parity: must be one of {', '.join(PARITIES)} (got {parity!r})")
    stop = t.get("stop_bits", 1)
    if stop not in (1, 2):
        add(f"serial.stop_bits: must be 1 or 2 (got {stop!r})")
    timeout = t.get("timeout_s", 0.5)
    if isinstance(timeout, bool) or not isinstance(timeout, (int, float)) or not 0 < timeout <= 10:
        add(f"serial.timeout_s: must be a number of seconds in (0, 10] (got {timeout!r})")
        timeout = 0.5
    ending = t.get("line_ending", "lf")
    if ending not in LINE_ENDINGS:
        add(f"serial.line_ending: must be one of {', '.join(LINE_ENDINGS)} (got {ending!r})")
    return SerialSettings(port, int(baud), int(bits) if bits in (7, 8) else 8, str(parity),
                          int(stop) if stop in (1, 2) else 1, float(timeout), str(ending))


def _valve(t: Any, add) -> tuple[tuple[tuple[float, float], ...], float, float]:
    if not isinstance(t, dict):
        add("valve: is missing (a table with points = [[ms, ul], ...])")
        return (), 0.0, 1.0
    for k in t:
        if k != "points":
            add(f"valve.{k}: unknown key (allowed: points)")
    raw = t.get("points")
    pts: list[tuple[float, float]] = []
    if not isinstance(raw, list):
        add(f"valve.points: must be a list of [open_ms, ul] pairs (got {raw!r})")
        return (), 0.0, 1.0
    for i, p in enumerate(raw):
        ok = (isinstance(p, list) and len(p) == 2
              and all(isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) and x > 0
                      for x in p))
        if not ok:
            add(f"valve.points[{i}]: must be [open_ms, ul] with both numbers > 0 (got {p!r})")
            continue
        pts.append((float(p[0]), float(p[1])))
    if len({ms for ms, _ in pts}) < 2:
        add("valve.points: need at least two points with different open times")
        return tuple(pts), 0.0, 1.0
    a, b = fit_line(pts)
    if b <= 0:
        add(f"valve.points: volume must grow with open time (fitted slope {fmt(b)} µL/ms)")
        return tuple(pts), a, 1.0
    for i, (ms, ul) in enumerate(pts):
        misfit = abs(a + b * ms - ul) / ul
        if misfit > MAX_RESIDUAL:
            add(f"valve.points[{i}]: [{fmt(ms)}, {fmt(ul)}] is {fmt(100 * misfit)}% off the fitted line "
                f"(ul = {fmt(a)} + {fmt(b)} * ms); recalibrate")
    lo = min(ul for _, ul in pts)
    if (lo - a) / b <= 0:
        add(f"valve.points: the fitted line gives a non-positive open time for {fmt(lo)} µL")
    return tuple(sorted(pts)), a, b


def profile_dirs() -> list[Path]:
    """Where profile names are looked up: ./rig_profiles, then the source tree's."""
    here = Path(__file__).resolve().parents[2] / "rig_profiles"
    return [Path.cwd() / "rig_profiles", here]


def profile_names() -> list[str]:
    seen: dict[str, None] = {}
    for d in profile_dirs():
        if d.is_dir():
            for f in sorted(d.glob("*.toml")):
                seen.setdefault(f.stem, None)
    return list(seen)


def load_profile(path_or_name) -> RigProfile:
    """Load a rig profile from a path, or by name from ``rig_profiles/``."""
    p = Path(path_or_name)
    if not p.exists() and p.suffix != ".toml":
        for d in profile_dirs():
            cand = d / f"{path_or_name}.toml"
            if cand.exists():
                p = cand
                break
        else:
            raise RuleError([f"no rig profile named {str(path_or_name)!r} "
                             f"(profiles: {', '.join(profile_names()) or 'none found'})"], str(path_or_name))
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise RuleError([f"cannot read the rig profile: {err}"], str(p)) from None
    return parse_profile(text, source=str(p))


def check_rules_on_profile(spec, profile: RigProfile) -> list[str]:
    """Problems running rules ``spec`` on a rig of ``profile``."""
    out: list[str] = []
    for cue, c in spec.cues.items():
        if cue not in profile.cues:
            out.append(f"cues.{cue}: rig profile {profile.name!r} cannot present this cue "
                       f"(it offers: {', '.join(profile.cues)})")
        if c.role in ("left", "right") and c.role not in profile.sides:
            out.append(f"cues.{cue}: role '{c.role}' needs a '{c.role}' choice side, which rig profile "
                       f"{profile.name!r} lacks (sides: {', '.join(profile.sides) or 'none'})")
    lo, hi = profile.ul_range
    for sname, st in spec.stages.items():
        for bname, b in st.blocks.items():
            for cue, k in b.contingency.items():
                if k.ul > 0 and not lo - 1e-9 <= k.ul <= hi + 1e-9:
                    out.append(f"stages.{sname}.blocks.{bname}.contingency.{cue}.ul: {fmt(k.ul)} µL is outside "
                               f"the valve calibration of rig profile {profile.name!r} ({fmt(lo)} to {fmt(hi)} µL)")
    rescue = spec.welfare.rescue_ul
    if rescue is not None and not lo <= rescue <= hi:
        out.append(f"welfare.rescue_ul: {fmt(rescue)} µL is outside the valve calibration of rig profile "
                   f"{profile.name!r} ({fmt(lo)} to {fmt(hi)} µL)")
    return out
