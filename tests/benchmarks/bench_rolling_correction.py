"""Time the within-frame (rolling-shutter) correction at 1920×1080 and print its row spread figures.

A benchmark, not a test: run it by hand, ``python tests/benchmarks/bench_rolling_correction.py``.
Timing: the remap maps for one frame (grey / RGB and planar yuv420p), the remap itself, the
plain ``cv2.warpPerspective`` it replaces, and the within-frame fit per frame. Figures: drawn
rolling-shutter clips (30 fps, 25 ms readout, 1.5 px vibration on 2–3 Hz shake) at 1280×720
and 640×360; within-frame row spread (band shifts by phase correlation) before and after.
"""

from __future__ import annotations

import argparse
import time

import cv2
import numpy as np

from stabilize.geometry import from_similarity
from stabilize.row_bands import band_centres, band_phase_shifts, exposure_times, within_frame_spread
from stabilize.row_motion import within_frame_motion
from stabilize.row_warp import plane_maps, remap, row_warp_maps
from stabilize.synthetic_rolling import (
    VibratingPath,
    draw_world,
    one_frame_difference,
    render_rolling,
)

FPS, READOUT, BANDS = 30.0, 0.025, 24


def _median_ms(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return 1e3 * float(np.median(times))


def timing(repeat: int) -> None:
    w, h = 1920, 1080
    c = from_similarity(np.array([[5.3, -3.1, np.radians(1.5), np.log(1.04)]]),
                        np.array([(w - 1) / 2, (h - 1) / 2]))[0]
    path = VibratingPath(vibration_hz=131.0, seed=131)
    rows = band_centres(h, BANDS)
    frames = np.repeat(np.arange(1, 301), BANDS)
    row = np.tile(rows, 300)
    t = exposure_times(frames / FPS, row, h, READOUT)
    d = one_frame_difference(path, t, FPS) + np.random.default_rng(0).normal(0, 0.05, t.shape
                                                                              + (2,))
    fit = _median_ms(lambda: within_frame_motion(frames, row, d, fps=FPS, height=h,
                                                 readout_s=READOUT), 3) / 301
    m = within_frame_motion(frames, row, d, fps=FPS, height=h, readout_s=READOUT)
    grey = draw_world(w, h, seed=1)
    rgb = np.dstack([grey, grey[::-1], grey[:, ::-1]])
    maps = row_warp_maps(c, m.rows_px, m.shift_px[100], (w, h))
    yuv = [grey, grey[::2, ::2].copy(), grey[1::2, ::2].copy()]
    sizes = [(w, h), (w // 2, h // 2), (w // 2, h // 2)]
    pm = plane_maps(c, m.rows_px, m.shift_px[100], sizes, (2, 2))
    print("1920×1080, per frame (median ms):")
    print(f"  within-frame fit            {fit:6.2f}")
    r, s = m.rows_px, m.shift_px[100]
    luma_ms = _median_ms(lambda: row_warp_maps(c, r, s, (w, h)), repeat)
    planes_ms = _median_ms(lambda: plane_maps(c, r, s, sizes, (2, 2)), repeat)
    print(f"  maps (luma)                 {luma_ms:6.2f}")
    print(f"  maps (yuv420p, 3 planes)    {planes_ms:6.2f}")
    print(f"  remap grey                  {_median_ms(lambda: remap(grey, maps), repeat):6.2f}")
    print(f"  remap RGB                   {_median_ms(lambda: remap(rgb, maps), repeat):6.2f}")
    print(f"  remap yuv420p planes        "
          f"{_median_ms(lambda: [remap(p, q) for p, q in zip(yuv, pm, strict=True)], repeat):6.2f}")
    print(f"  warpPerspective grey (ref.) "
          f"{_median_ms(lambda: cv2.warpPerspective(grey, c, (w, h)), repeat):6.2f}")
    print(f"  warpPerspective RGB (ref.)  "
          f"{_median_ms(lambda: cv2.warpPerspective(rgb, c, (w, h)), repeat):6.2f}")


def _bands(frames: np.ndarray, readout_s: float):
    fr, rows, d = [], [], []
    for t in range(1, len(frames)):
        b = band_phase_shifts(frames[t - 1], frames[t], n_bands=BANDS, frame_time_s=t / FPS,
                              readout_s=readout_s)
        fr.append(np.full(BANDS, t))
        rows.append(b.row_px)
        d.append(b.shift_px)
    return np.concatenate(fr), np.concatenate(rows), np.concatenate(d)


def figures(width: int, height: int, n_frames: int) -> None:
    print(f"{width}×{height}, {n_frames} frames: mean within-frame row spread (px)")
    for freq, readout, assumed in ((47.0, READOUT, READOUT), (83.0, READOUT, READOUT),
                                   (131.0, READOUT, READOUT), (83.0, 0.0, READOUT)):
        path = VibratingPath(vibration_hz=freq, seed=int(freq))
        world = draw_world(width + 160, height + 160, seed=int(freq) + 1)
        frames = render_rolling(world, path, width=width, height=height, fps=FPS,
                                n_frames=n_frames, readout_s=readout, noise_sigma=1.0,
                                seed=int(freq))
        fr, rows, d = _bands(frames, assumed)
        m = within_frame_motion(fr, rows, d, fps=FPS, height=height, readout_s=assumed,
                                band_s=assumed / BANDS)
        out = np.stack([remap(f, row_warp_maps(np.eye(3), m.rows_px, m.shift_px[k],
                                               (width, height)), border=cv2.BORDER_REFLECT)
                        for k, f in enumerate(frames)])
        _, _, d2 = _bands(out, assumed)
        before = float(np.mean(within_frame_spread(d.reshape(-1, BANDS, 2))))
        after = float(np.mean(within_frame_spread(d2.reshape(-1, BANDS, 2))))
        label = (f"{freq:5.0f} Hz" if readout > 0 else
                 f"global shutter, {freq:.0f} Hz, analysed with a {assumed * 1e3:.0f} ms readout")
        print(f"  {label}: before {before:.3f}  after {after:.3f}  ratio {after / before:.3f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=20)
    ap.add_argument("--frames", type=int, default=60)
    args = ap.parse_args()
    timing(args.repeat)
    figures(1280, 720, args.frames)
    figures(640, 360, args.frames)


if __name__ == "__main__":
    main()
