"""Settings: one frozen dataclass for every option, TOML settings files, validation.

Ground floor. Messages name a setting as ``setting 'window_s'``; the command line words that
as its flag.

Precedence is fixed: command-line flags win over a settings file (a TOML path, or the name of
one in ``configs/``), which wins over the built-in defaults. Every value is validated here,
so the stages can trust what they get.
"""

from __future__ import annotations

import dataclasses
import math
import sys
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import StabilizeError

__all__ = [
    "ANALYSIS_LEVELS", "AUTO_MARGIN_CAP", "CODECS", "FILLS", "MAX_MARGIN", "MAX_PX",
    "MAX_READOUT_MS", "MAX_ROUNDS", "MAX_WINDOW_S", "MODELS", "OPTION_NAMES", "PIN_OVERLAYS",
    "PLAIN_SURROUND",
    "PRESETS_X264", "SMOOTHERS", "Region", "Settings", "build_settings", "coerce",
    "logged_settings", "parse_region", "preset_dirs", "preset_names", "read_config",
    "resolve_config", "resolve_settings", "setting_label", "validate",
]

MODELS = ("translation", "similarity", "affine", "homography")
SMOOTHERS = ("gaussian", "kalman", "l1", "lockoff")
FILLS = ("black", "reflect", "replicate")
#: Which still regions the steadied video keeps where they are in the source frame (see
#: :mod:`stabilize.pinning`): the static overlays the analysis found, those and the
#: ``ignore`` regions, or none.
PIN_OVERLAYS = ("found", "all", "off")
#: What the analysis logs for a frame whose tracks cover only part of the picture, the rest
#: of it plain (a bare wall, a clear sky), so that nothing tells a large object moving before
#: a still camera from a structure seen by a moving one: no motion (``hold``, the default,
#: never an object's motion as the camera's) or the tracks' motion (``follow``: a drone
#: before a clear sky). Either way the frame is ``weak``, reason ``unconfirmed``.
PLAIN_SURROUND = ("hold", "follow")
#: How much work the analysis puts into each frame, quickest first (see
#: :func:`stabilize.track.track_settings_for`).
ANALYSIS_LEVELS = ("fast", "balanced", "thorough")
CODECS = ("h264", "h265", "ffv1")
PRESETS_X264 = (
    "ultrafast", "superfast", "veryfast", "faster", "fast",
    "medium", "slow", "slower", "veryslow", "placebo",
)
MAX_MARGIN = 0.45
#: Longest readout accepted (ms): a frame's readout never exceeds its interval, and 24 fps
#: is the slowest common rate.
MAX_READOUT_MS = 42.0
AUTO_MARGIN_CAP = 0.25
#: Most hypotheses per frame (10 times the default): more never changes a fit and only costs
#: time (common practice).
MAX_ROUNDS = 20000
#: Longest smoothing window in seconds (an hour): a longer one is a still camera, which the
#: lock-off smoother gives directly.
MAX_WINDOW_S = 3600.0
#: Largest frame size in pixels an ``ignore`` region or ``analysis_width`` may name.
MAX_PX = 1 << 16

Region = tuple[int, int, int, int]


@dataclass(frozen=True)
class Settings:
    """Every effective option of a run.

    Units are in the names: ``window_s`` seconds, ``inlier_px`` full-resolution pixels,
    ``fov_deg`` degrees, ``shake_above_hz`` hertz. ``margin`` is ``"auto"`` or the fraction of
    the frame width and height cut from each side. ``ignore`` holds (x, y, w, h) rectangles in
    full-resolution pixels. ``readout_ms`` is the camera's first-to-last-row readout time in
    milliseconds: 0 for a global shutter (the default: no rolling-shutter analysis), a number
    for a known rolling shutter, or ``"auto"`` to estimate it from the footage. ``analysis``
    is one of :data:`ANALYSIS_LEVELS`: the effort spent on tracking each frame, trading
    analysis time for accuracy. ``pin_overlays`` is one of :data:`PIN_OVERLAYS`: which
    regions are copied unwarped from the source frame into the steadied one (static overlays
    found, those and the ``ignore`` regions, or none). ``plain_surround`` is one of
    :data:`PLAIN_SURROUND`: the motion logged where only part of the picture is tracked and
    the rest is plain.
    """

    model: str = "similarity"
    smoother: str = "gaussian"
    window_s: float = 1.0
    margin: str | float = "auto"
    fill: str = "black"
    pin_overlays: str = "found"
    plain_surround: str = "hold"
    analysis_width: int = 960
    analysis: str = "balanced"
    ignore: tuple[Region, ...] = field(default_factory=tuple)
    inlier_px: float = 1.5
    confidence: float = 0.999
    max_rounds: int = 2000
    seed: int = 0
    fov_deg: float | None = None
    shake_above_hz: float = 1.0
    readout_ms: str | float = 0.0
    crf: int = 18
    preset: str = "medium"
    codec: str = "h264"
    compare: bool = False
    force: bool = False
    quiet: bool = False

    def __post_init__(self) -> None:
        validate(self)

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready mapping of every option."""
        out = dataclasses.asdict(self)
        out["ignore"] = [list(r) for r in self.ignore]
        if self.readout_ms == 0:
            # A global shutter (the default) is written as the key's absence, so logs made
            # without the rolling-shutter analysis read exactly as before it existed.
            del out["readout_ms"]
        return out

    def replace(self, **changes: Any) -> Settings:
        """A copy with some options changed (validated again)."""
        return dataclasses.replace(self, **coerce(changes, "option"))


OPTION_NAMES = tuple(f.name for f in dataclasses.fields(Settings))


def setting_label(name: str) -> str:
    """How a message names a setting: ``setting 'window_s'`` (the CLI rewords it as a flag)."""
    return f"setting '{name}'"


def _bad(name: str, value: Any, allowed: str) -> StabilizeError:
    return StabilizeError(f"{setting_label(name)}: {value!r} is not allowed; use {allowed}")


# What each numeric option allows, in the words its error message uses; a value that is not
# a number at all gets the same words, so the user learns the range in one go.
_ALLOWED = {
    "window_s": f"a positive number of seconds, at most {MAX_WINDOW_S:g}",
    "inlier_px": "a positive number of pixels",
    "shake_above_hz": "a positive number of hertz",
    "margin": f"'auto' or a fraction from 0 to {MAX_MARGIN}",
    "confidence": "a probability strictly between 0 and 1",
    "max_rounds": f"a whole number of at least 1 and at most {MAX_ROUNDS}",
    "analysis_width": f"0 (full resolution) or a whole number of pixels of at least 32 and "
                      f"at most {MAX_PX}",
    "seed": "a whole number of 0 or more, below 2**32",
    "fov_deg": "an angle between 0 and 180 degrees",
    "crf": "a whole number from 0 to 51",
    "readout_ms": f"'auto' or a number of milliseconds from 0 to {MAX_READOUT_MS:g}",
}


def validate(s: Settings) -> None:
    """Raise StabilizeError naming the first bad option and the values it allows."""
    choices = {
        "model": MODELS, "smoother": SMOOTHERS, "fill": FILLS, "codec": CODECS,
        "preset": PRESETS_X264, "analysis": ANALYSIS_LEVELS, "pin_overlays": PIN_OVERLAYS,
        "plain_surround": PLAIN_SURROUND,
    }
    for name, allowed in choices.items():
        if getattr(s, name) not in allowed:
            raise _bad(name, getattr(s, name), "one of " + ", ".join(allowed))
    positive = {"window_s": s.window_s, "inlier_px": s.inlier_px,
                "shake_above_hz": s.shake_above_hz}
    for name, value in positive.items():
        if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
            raise _bad(name, value, _ALLOWED[name])
    if s.window_s > MAX_WINDOW_S:
        raise _bad("window_s", s.window_s, _ALLOWED["window_s"])
    if s.margin != "auto" and not (
        isinstance(s.margin, int | float) and 0.0 <= s.margin <= MAX_MARGIN
    ):
        raise _bad("margin", s.margin, _ALLOWED["margin"])
    if not (isinstance(s.confidence, float | int) and 0.0 < s.confidence < 1.0):
        raise _bad("confidence", s.confidence, _ALLOWED["confidence"])
    if not (isinstance(s.max_rounds, int) and 1 <= s.max_rounds <= MAX_ROUNDS):
        raise _bad("max_rounds", s.max_rounds, _ALLOWED["max_rounds"])
    if not (isinstance(s.analysis_width, int) and (s.analysis_width == 0
                                                   or 32 <= s.analysis_width <= MAX_PX)):
        raise _bad("analysis_width", s.analysis_width, _ALLOWED["analysis_width"])
    if not isinstance(s.seed, int) or not 0 <= s.seed < 2**32:
        raise _bad("seed", s.seed, _ALLOWED["seed"])
    if s.fov_deg is not None and not (
        isinstance(s.fov_deg, int | float) and 0.0 < s.fov_deg < 180.0
    ):
        raise _bad("fov_deg", s.fov_deg, _ALLOWED["fov_deg"])
    if s.readout_ms != "auto" and not (
        isinstance(s.readout_ms, int | float) and not isinstance(s.readout_ms, bool)
        and 0.0 <= s.readout_ms <= MAX_READOUT_MS
    ):
        raise _bad("readout_ms", s.readout_ms, _ALLOWED["readout_ms"])
    if not (isinstance(s.crf, int) and 0 <= s.crf <= 51):
        raise _bad("crf", s.crf, _ALLOWED["crf"])
    if not isinstance(s.ignore, tuple):
        raise _bad("ignore", s.ignore, "a list of X,Y,W,H regions")
    for r in s.ignore:
        if not (isinstance(r, tuple) and len(r) == 4
                and all(isinstance(v, int) and abs(v) <= MAX_PX for v in r)) \
                or r[2] <= 0 or r[3] <= 0:
            raise _bad("ignore", r, "X,Y,W,H with positive width and height")


def parse_region(text: str) -> Region:
    """Parse ``X,Y,W,H`` (full-resolution pixels) into a tuple of ints."""
    parts = [p.strip() for p in str(text).split(",")]
    try:
        values = tuple(int(round(float(p))) for p in parts)
    except (ValueError, OverflowError):  # not numbers, or nan / inf
        raise _bad("ignore", text, "X,Y,W,H in pixels, e.g. 0,980,1920,100") from None
    if len(values) != 4 or values[2] <= 0 or values[3] <= 0:
        raise _bad("ignore", text, "X,Y,W,H with positive width and height")
    if any(abs(v) > MAX_PX for v in values):
        raise _bad("ignore", text, f"X,Y,W,H in pixels, each within {MAX_PX}")
    return values  # type: ignore[return-value]


def _to_number(name: str, value: Any, kind: type) -> Any:
    """A flag's text or a TOML value as ``kind``; whole numbers may be written ``1e3``."""
    allowed = _ALLOWED.get(name, "a whole number" if kind is int else "a number")
    if isinstance(value, bool):
        raise _bad(name, value, allowed)
    try:
        number = float(value) if kind is int and not isinstance(value, int) else kind(value)
    except (TypeError, ValueError, OverflowError):
        raise _bad(name, value, allowed) from None
    if kind is int:
        if not (isinstance(number, int) or (math.isfinite(number) and number.is_integer())):
            raise _bad(name, value, allowed)
        number = int(number)
    return number


_FLOATS = {"window_s", "inlier_px", "confidence", "shake_above_hz"}
_INTS = {"analysis_width", "max_rounds", "seed", "crf"}
_BOOLS = {"compare", "force", "quiet"}


def coerce(values: dict[str, Any], where: str) -> dict[str, Any]:
    """Turn raw values (strings from flags, TOML values) into typed option values.

    ``where`` names the source (a file path or "option") for error messages about unknown keys.
    """
    out: dict[str, Any] = {}
    for name, value in values.items():
        if name not in OPTION_NAMES:
            raise StabilizeError(
                f"{where}: unknown option {name!r}; known options: {', '.join(OPTION_NAMES)}"
            )
        if name in _FLOATS:
            value = _to_number(name, value, float)
        elif name in _INTS:
            value = _to_number(name, value, int)
        elif name in ("model", "smoother", "fill", "codec", "preset", "pin_overlays",
                      "plain_surround"):
            if not isinstance(value, str):
                raise _bad(name, value, "a name in quotes")
        elif name in _BOOLS:
            if not isinstance(value, bool):
                raise _bad(name, value, "true or false")
        elif name == "margin":
            if value != "auto":
                value = _to_number(name, value, float)
        elif name == "readout_ms":
            if value != "auto":
                value = _to_number(name, value, float)
        elif name == "fov_deg":
            value = None if value is None else _to_number(name, value, float)
        elif name == "ignore":
            if isinstance(value, str):
                value = [value]
            if not isinstance(value, list | tuple):
                raise _bad(name, value, "a list of X,Y,W,H regions, e.g. [[0, 980, 1920, 100]]")
            value = tuple(
                parse_region(",".join(map(str, r)) if isinstance(r, list | tuple) else r)
                for r in value
            )
        out[name] = value
    return out


def preset_dirs() -> list[Path]:
    """Folders searched for named settings files: the source tree's configs/, then the
    installed copy. (The encoder's ``preset`` is another thing: its speed.)"""
    here = Path(__file__).resolve().parent
    return [here.parent / "configs", Path(sys.prefix) / "share" / "stabilize" / "configs"]


def preset_names() -> list[str]:
    """The names of the settings files in configs/ (``drone-inspection`` …)."""
    names: set[str] = set()
    for d in preset_dirs():
        if d.is_dir():
            names.update(p.stem for p in d.glob("*.toml"))
    return sorted(names)


def resolve_config(name_or_path: str) -> Path:
    """A settings file's path, or the name of one looked up in configs/."""
    path = Path(name_or_path)
    if path.suffix == ".toml" or path.exists():
        if not path.is_file():
            raise StabilizeError(f"{path}: settings file not found")
        return path
    for d in preset_dirs():
        candidate = d / f"{name_or_path}.toml"
        if candidate.is_file():
            return candidate
    raise StabilizeError(
        f"{setting_label('config')}: no settings file named {name_or_path!r} in configs/; "
        f"named ones: {', '.join(preset_names()) or 'none found'}, or give a .toml file"
    )


def read_config(name_or_path: str) -> dict[str, Any]:
    """Read a TOML config (flat keys named like the options, ``-`` or ``_``)."""
    path = resolve_config(name_or_path)
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise StabilizeError(f"{path}: cannot read the settings file ({exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise StabilizeError(f"{path}: not valid TOML ({exc})") from None
    flat = {k.replace("-", "_"): v for k, v in raw.items()}
    try:
        return coerce(flat, str(path))
    except StabilizeError as exc:
        if str(exc).startswith(f"{path}:"):
            raise
        raise StabilizeError(f"{path}: {exc}") from None


def build_settings(
    config: str | None = None, overrides: dict[str, Any] | None = None
) -> Settings:
    """Defaults, then the settings file (a path or a name in configs/), then explicit
    overrides (flags or keywords)."""
    values: dict[str, Any] = {}
    if config:
        values.update(read_config(config))
        try:
            Settings(**values)  # a bad value is the file's fault: name the file
        except StabilizeError as exc:
            raise StabilizeError(f"{resolve_config(config)}: {exc}") from None
    if overrides:
        values.update(coerce({k: v for k, v in overrides.items() if v is not None}, "option"))
    return Settings(**values)


def resolve_settings(config: str | None, options: dict[str, Any]) -> Settings:
    """The settings of a job called with ``config`` and keyword ``options``.

    A ready :class:`Settings` passed as ``options["settings"]`` is the base (the other options
    are laid over it, ``config`` is then not read); otherwise :func:`build_settings`.
    ``options`` is not changed.
    """
    options = dict(options)
    if isinstance(options.get("settings"), Settings):
        base = options.pop("settings")
        return base.replace(**{k: v for k, v in options.items() if v is not None})
    return build_settings(config, options)


def logged_settings(saved: dict[str, Any], config: str | None = None,
                    options: dict[str, Any] | None = None) -> Settings:
    """The settings a motion log was made with, the options given now laid over them.

    With ``config`` the log's settings are not used (:func:`resolve_settings`). A log is data:
    settings it holds that are no longer valid fall back to the defaults.

    Parameters
    ----------
    saved : the log's ``settings`` mapping.
    config : settings file (TOML path or a name in configs/) given now, or None.
    options : options given now (None values are ignored).
    """
    options = options or {}
    if config:
        return resolve_settings(config, options)
    base = {k: v for k, v in saved.items() if k in Settings.__dataclass_fields__}
    try:
        base["ignore"] = tuple(tuple(r) for r in base.get("ignore", ()))
        logged = Settings(**base)
    except (TypeError, ValueError, StabilizeError):
        logged = Settings()
    return logged.replace(**{k: v for k, v in options.items() if v is not None})
