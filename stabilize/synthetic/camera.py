"""Camera motion of a synthetic clip: shake and deliberate-motion specs, parameters → homographies.

Everything is a function of continuous time in seconds, so the same spec sampled at 30 and at
60 fps shows the same camera at equal times. The camera parameters (``x``, ``y`` world px,
``roll_deg``, ``log_zoom``, ``shear``, ``aspect``, ``tilt_x_deg``, ``tilt_y_deg``) become the
world→frame homographies ``G_t`` of :mod:`stabilize.synthetic.clip` in
:func:`world_to_frame_matrices`; pixel convention as in :mod:`stabilize.geometry` (x right,
y down, origin at the centre of the top-left pixel).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

from ..geometry import normalise

__all__ = [
    "CHANNELS",
    "MODELS",
    "MotionSpec",
    "NoiseBand",
    "ShakeSpec",
    "ShakeTable",
    "Sinusoid",
    "camera_params",
    "shake_offsets",
    "shake_tables",
    "translations",
    "world_to_frame_matrices",
]

Model = Literal["translation", "similarity", "affine", "perspective"]
MODELS: tuple[str, ...] = ("translation", "similarity", "affine", "perspective")

#: The shake channels of :class:`Sinusoid` and :class:`NoiseBand`, in the order their
#: phases are drawn.
CHANNELS = ("x_px", "y_px", "roll_deg", "zoom", "shear")

#: Realised shake: (channel, amplitudes, frequencies in Hz, phases in radians) per entry.
ShakeTable = list[tuple[str, np.ndarray, np.ndarray, np.ndarray]]


@dataclass(frozen=True)
class Sinusoid:
    """One sinusoidal shake component; the phase of each channel is drawn from the clip seed.

    Amplitudes (peak): ``x_px``/``y_px`` camera displacement over the world in world pixels
    (≈ apparent image jitter in frame pixels at zoom 1; content moves the opposite way),
    ``roll_deg`` in degrees, ``zoom`` in natural-log zoom units (0.01 ≈ 1 %), ``shear``
    dimensionless (affine model only). ``freq_hz`` in hertz.
    """

    freq_hz: float
    x_px: float = 0.0
    y_px: float = 0.0
    roll_deg: float = 0.0
    zoom: float = 0.0
    shear: float = 0.0


@dataclass(frozen=True)
class NoiseBand:
    """Band-limited random shake between ``low_hz`` and ``high_hz`` (hertz).

    Realised as a sum of ``partials`` sinusoids with seeded random frequencies in the band and
    random phases, evaluated in continuous time (so it does not depend on the frame rate).
    Amplitudes are RMS values in the units of :class:`Sinusoid`.
    """

    low_hz: float
    high_hz: float
    x_px: float = 0.0
    y_px: float = 0.0
    roll_deg: float = 0.0
    zoom: float = 0.0
    shear: float = 0.0
    partials: int = 16


@dataclass(frozen=True)
class ShakeSpec:
    """Unintended camera motion: a sum of sinusoids and noise bands. ``ShakeSpec()`` is still."""

    sinusoids: tuple[Sinusoid, ...] = ()
    bands: tuple[NoiseBand, ...] = ()

    @classmethod
    def drone(
        cls,
        wind_px: float = 3.0,
        vibration_px: float = 0.3,
        drift_px: float = 4.0,
        roll_deg: float = 0.4,
        zoom: float = 0.003,
        shear: float = 0.002,
    ) -> ShakeSpec:
        """A small multirotor in gusty air.

        Wind buffeting 0.5–3 Hz (``wind_px`` RMS, ``roll_deg`` RMS roll, ``zoom`` RMS log-zoom,
        ``shear`` RMS shear), airframe vibration 5–12 Hz (``vibration_px`` RMS) with a rotor
        tone at 9 Hz, and slow gimbal drift 0.02–0.15 Hz (``drift_px`` RMS).

        Parameters
        ----------
        wind_px : wind buffeting along x, pixels RMS (y gets 0.8 of it).
        vibration_px : airframe vibration, pixels RMS (the rotor tone has half of it as
            amplitude).
        drift_px : gimbal drift along x, pixels RMS (y gets 0.6 of it).
        roll_deg : roll of the wind band, degrees RMS (vibration gets 0.1 and drift 0.5 of it).
        zoom : log-zoom of the wind band, RMS (dimensionless).
        shear : shear of the wind band, RMS (dimensionless).

        Returns
        -------
        ShakeSpec
        """
        return cls(
            sinusoids=(Sinusoid(9.0, x_px=0.5 * vibration_px, y_px=0.5 * vibration_px),),
            bands=(
                NoiseBand(0.5, 3.0, x_px=wind_px, y_px=0.8 * wind_px, roll_deg=roll_deg,
                          zoom=zoom, shear=shear),
                NoiseBand(5.0, 12.0, x_px=vibration_px, y_px=vibration_px,
                          roll_deg=0.1 * roll_deg),
                NoiseBand(0.02, 0.15, x_px=drift_px, y_px=0.6 * drift_px,
                          roll_deg=0.5 * roll_deg, partials=4),
            ),
        )

    def scaled(self, factor: float) -> ShakeSpec:
        """The same shake with every amplitude multiplied by ``factor`` (phases unchanged).

        Parameters
        ----------
        factor : multiplier of every channel's amplitude (pixels, degrees, zoom, shear).

        Returns
        -------
        ShakeSpec : a new spec; frequencies as they were.
        """

        def sc(c):
            return type(c)(**{**c.__dict__, **{k: getattr(c, k) * factor for k in CHANNELS}})

        return ShakeSpec(tuple(sc(s) for s in self.sinusoids), tuple(sc(b) for b in self.bands))


@dataclass(frozen=True)
class MotionSpec:
    """Deliberate (intended) camera motion, in seconds; all rates are per second.

    ``pan_px_s``: camera speed towards +x over the world, world px/s (content moves towards −x).
    ``climb_px_s``: camera speed towards −y (up), world px/s (content moves down).
    ``zoom``: initial frame px per world px; ``zoom_per_s``: natural-log zoom rate (> 0 zooms in).
    ``roll_deg`` / ``roll_deg_s``: rotation of the image content, degrees measured from +x towards
    +y (clockwise on screen), about the frame centre.
    ``shear`` / ``aspect`` (+ rates): affine model only; ``aspect`` is ln(x scale / y scale).
    ``tilt_x_deg`` / ``tilt_y_deg`` (+ rates): perspective model only; out-of-plane rotation of a
    camera over the planar scene; a positive value shifts content at the frame centre towards
    +x / +y by ``f·tan(angle)`` pixels (``f`` from ``SceneSpec.hfov_deg``).
    """

    pan_px_s: float = 40.0
    climb_px_s: float = 0.0
    zoom: float = 1.0
    zoom_per_s: float = 0.0
    roll_deg: float = 0.0
    roll_deg_s: float = 0.0
    shear: float = 0.0
    shear_per_s: float = 0.0
    aspect: float = 0.0
    aspect_per_s: float = 0.0
    tilt_x_deg: float = 0.0
    tilt_y_deg: float = 0.0
    tilt_x_deg_s: float = 0.0
    tilt_y_deg_s: float = 0.0



def shake_tables(shake: ShakeSpec, seed: int) -> ShakeTable:
    """Realise a shake spec as sinusoids with phases (and band frequencies) drawn from ``seed``.

    Parameters
    ----------
    shake : the shake spec.
    seed : the clip seed.

    Returns
    -------
    ShakeTable : per sinusoid and channel, (channel, amplitude, frequency Hz, phase rad)
    arrays; a noise band contributes ``partials`` sinusoids of RMS ``amplitude``.
    """
    rng = np.random.default_rng([seed, 1])
    sines: ShakeTable = []  # (channel, amplitude, freq, phase) arrays
    for comp in shake.sinusoids:
        for ch in CHANNELS:
            sines.append((ch, np.array([getattr(comp, ch)]), np.array([comp.freq_hz]),
                          rng.uniform(0, 2 * np.pi, 1)))
    for band in shake.bands:
        n = max(1, band.partials)
        for ch in CHANNELS:
            # Always draw, so changing one amplitude leaves the other channels' phases alone.
            f = rng.uniform(band.low_hz, band.high_hz, n)
            ph = rng.uniform(0, 2 * np.pi, n)
            amp = np.full(n, getattr(band, ch) * math.sqrt(2.0 / n))
            sines.append((ch, amp, f, ph))
    return sines


def shake_offsets(tables: ShakeTable, t: np.ndarray) -> dict[str, np.ndarray]:
    """The shake of every channel at times ``t``.

    Parameters
    ----------
    tables : from :func:`shake_tables`.
    t : (n,) times, seconds.

    Returns
    -------
    dict : channel of :data:`CHANNELS` → (n,) offset in that channel's unit.
    """
    out = {ch: np.zeros_like(t) for ch in CHANNELS}
    for ch, amp, f, ph in tables:
        out[ch] = out[ch] + (amp * np.sin(2 * np.pi * f * t[:, None] + ph)).sum(axis=1)
    return out


def camera_params(motion: MotionSpec, model: str, t: np.ndarray,
                  shake: dict[str, np.ndarray] | None, focal_px: float) -> dict[str, np.ndarray]:
    """Camera parameters in path coordinates (the shake-free camera starts at x = y = 0).

    Parameters
    ----------
    motion : the deliberate motion.
    model : one of :data:`MODELS`; components outside it are held at zero.
    t : (n,) times, seconds.
    shake : :func:`shake_offsets` at ``t``, or None for the shake-free camera.
    focal_px : focal length, pixels (turns shake into tilt in the perspective model).

    Returns
    -------
    dict : ``x``, ``y`` (world px), ``roll_deg``, ``log_zoom``, ``shear``, ``aspect``,
    ``tilt_x_deg``, ``tilt_y_deg``, each (n,).
    """
    m = motion
    p = {
        "x": m.pan_px_s * t,
        "y": -m.climb_px_s * t,
        "roll_deg": m.roll_deg + m.roll_deg_s * t,
        "log_zoom": math.log(m.zoom) + m.zoom_per_s * t,
        "shear": m.shear + m.shear_per_s * t,
        "aspect": m.aspect + m.aspect_per_s * t,
        "tilt_x_deg": m.tilt_x_deg + m.tilt_x_deg_s * t,
        "tilt_y_deg": m.tilt_y_deg + m.tilt_y_deg_s * t,
    }
    if shake is not None:
        s = shake
        p["roll_deg"] = p["roll_deg"] + s["roll_deg"]
        p["log_zoom"] = p["log_zoom"] + s["zoom"]
        p["shear"] = p["shear"] + s["shear"]
        if model == "perspective":
            # Real airframe shake is mostly rotation: turn the displacement into tilt that
            # moves the content at the centre by the same amount.
            z = np.exp(p["log_zoom"])
            p["tilt_x_deg"] = p["tilt_x_deg"] + np.degrees(np.arctan(-s["x_px"] * z / focal_px))
            p["tilt_y_deg"] = p["tilt_y_deg"] + np.degrees(np.arctan(-s["y_px"] * z / focal_px))
        else:
            p["x"] = p["x"] + s["x_px"]
            p["y"] = p["y"] + s["y_px"]
    zero = np.zeros_like(t)
    if model == "translation":
        p["roll_deg"] = p["log_zoom"] = zero
    if model in ("translation", "similarity"):
        p["shear"] = p["aspect"] = zero
    if model != "perspective":
        p["tilt_x_deg"] = p["tilt_y_deg"] = zero
    return p


def _stack(n: int) -> np.ndarray:
    return np.tile(np.eye(3), (n, 1, 1))


def translations(tx: np.ndarray, ty: np.ndarray) -> np.ndarray:
    """Pure translations by ``tx``, ``ty``.

    Parameters
    ----------
    tx, ty : (n,) shifts along x (right) and y (down), pixels.

    Returns
    -------
    (n, 3, 3) translation matrices.
    """
    m = _stack(len(tx))
    m[:, 0, 2], m[:, 1, 2] = tx, ty
    return m


def world_to_frame_matrices(p: dict[str, np.ndarray], w: int, h: int, f: float) -> np.ndarray:
    """World→frame homographies from camera parameters.

    Parameters
    ----------
    p : :func:`camera_params` (``x``, ``y`` shifted to world coordinates), each (n,).
    w, h : frame size, pixels.
    f : focal length, pixels (perspective tilt).

    Returns
    -------
    (n, 3, 3) : ``G_t``, normalised to ``h33 = 1``.
    """
    n = len(p["x"])
    world = translations(-p["x"], -p["y"])
    z = np.exp(p["log_zoom"])
    zoom = _stack(n)
    zoom[:, 0, 0] = zoom[:, 1, 1] = z
    th = np.radians(p["roll_deg"])
    rot = _stack(n)
    rot[:, 0, 0], rot[:, 0, 1], rot[:, 1, 0], rot[:, 1, 1] = (
        np.cos(th), -np.sin(th), np.sin(th), np.cos(th))
    aff = _stack(n)
    aff[:, 0, 0], aff[:, 1, 1], aff[:, 0, 1] = (
        np.exp(p["aspect"] / 2), np.exp(-p["aspect"] / 2), p["shear"])
    # Rotation of a pinhole camera (K R K^-1, centred coordinates); Ry(a)·Rx(-b) makes a
    # positive tilt shift the centre by +f·tan along x / y.
    a, b = np.radians(p["tilt_x_deg"]), np.radians(p["tilt_y_deg"])
    ry = _stack(n)
    ry[:, 0, 0], ry[:, 0, 2], ry[:, 2, 0], ry[:, 2, 2] = np.cos(a), np.sin(a), -np.sin(a), np.cos(a)
    rx = _stack(n)
    rx[:, 1, 1], rx[:, 1, 2], rx[:, 2, 1], rx[:, 2, 2] = np.cos(b), np.sin(b), -np.sin(b), np.cos(b)
    k = np.diag([f, f, 1.0])
    persp = k @ ry @ rx @ np.linalg.inv(k)
    centre = translations(np.full(n, (w - 1) / 2.0), np.full(n, (h - 1) / 2.0))
    return normalise(centre @ persp @ aff @ rot @ zoom @ world)
