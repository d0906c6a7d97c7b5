"""Accuracy and speed of stabilize.consensus.estimate against OpenCV's RANSAC estimators.

Run: ``python tests/benchmarks/bench_consensus.py [--quick]``

1. Accuracy: 500 correspondences in a 1920x1080 frame, Gaussian noise sigma = 0.5 px
   (per axis, on dst), 50 % outliers uniform over the frame, 50 trials per model:
   median grid transfer error (10x10 grid, pixels) and median inlier recall.
2. Speed: 1000 correspondences, 30 % outliers, threshold 1.5 px, confidence 0.999,
   at most 2000 iterations for both; calls interleaved (ours, OpenCV, ours, ...) over
   many repetitions; median time per call with OpenCV's default thread count and
   with one thread, beside the median grid transfer error of both on the same calls
   (10x10 grid against the ground truth, pixels).

Synthetic ground truth only (invented data).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import cv2
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "consensus"))
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from consensus_data import HEIGHT, WIDTH, make_matches  # noqa: E402

from stabilize.consensus import estimate, grid_transfer_error  # noqa: E402

MODELS = ("translation", "similarity", "affine", "homography")
THRESH = 1.5
CONF = 0.999
ROUNDS = 2000


def opencv(model: str, src: np.ndarray, dst: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """OpenCV's estimator for ``model``: (3x3 matrix, inlier mask)."""
    kw = dict(method=cv2.RANSAC, ransacReprojThreshold=THRESH, maxIters=ROUNDS,
              confidence=CONF)
    if model == "translation":
        t, mask = cv2.estimateTranslation2D(src, dst, **kw)
        m = np.array([[1.0, 0.0, t[0]], [0.0, 1.0, t[1]], [0.0, 0.0, 1.0]])
    elif model == "similarity":
        a, mask = cv2.estimateAffinePartial2D(src, dst, **kw)
        m = np.vstack([a, (0.0, 0.0, 1.0)]) if a is not None else np.eye(3)
    elif model == "affine":
        a, mask = cv2.estimateAffine2D(src, dst, **kw)
        m = np.vstack([a, (0.0, 0.0, 1.0)]) if a is not None else np.eye(3)
    else:
        m, mask = cv2.findHomography(src, dst, cv2.RANSAC, THRESH, maxIters=ROUNDS,
                                     confidence=CONF)
        m = m if m is not None else np.eye(3)
    inl = np.zeros(len(src), bool) if mask is None else mask.ravel().astype(bool)
    return m, inl


def ours(model: str, src: np.ndarray, dst: np.ndarray, seed: int):
    return estimate(src, dst, model=model, inlier_px=THRESH, confidence=CONF,
                    max_rounds=ROUNDS, seed=seed, frame_size=(WIDTH, HEIGHT))


def accuracy(trials: int) -> bool:
    print(f"Accuracy: n=500, sigma=0.5 px, 50% outliers, {trials} trials per model")
    print(f"{'model':<12}{'ours err px':>12}{'cv err px':>11}{'ours recall':>13}"
          f"{'cv recall':>11}  verdict (<=0.15 px, recall>=0.95, no worse than cv)")
    good = True
    for model in MODELS:
        e_o, e_c, r_o, r_c = [], [], [], []
        for trial in range(trials):
            rng = np.random.default_rng([2024, trial])
            h, src, dst, is_in = make_matches(rng, model, n=500, outliers=0.5, sigma=0.5)
            fit = ours(model, src, dst, trial)
            m, inl = opencv(model, src, dst)
            e_o.append(grid_transfer_error(h, fit.matrix, WIDTH, HEIGHT))
            e_c.append(grid_transfer_error(h, m, WIDTH, HEIGHT))
            r_o.append((fit.inliers & is_in).sum() / is_in.sum())
            r_c.append((inl & is_in).sum() / is_in.sum())
        eo, ec, ro, rc = (float(np.median(v)) for v in (e_o, e_c, r_o, r_c))
        ok = eo <= 0.15 and ro >= 0.95 and eo <= ec + 1e-3
        good &= ok
        print(f"{model:<12}{eo:>12.4f}{ec:>11.4f}{ro:>13.4f}{rc:>11.4f}  "
              f"{'PASS' if ok else 'FAIL'}")
    return good


def speed(reps: int, datasets: int = 10) -> None:
    print(f"\nSpeed: n=1000, 30% outliers, t={THRESH} px, p={CONF}, max {ROUNDS} iterations; "
          f"median of {reps * datasets} interleaved calls")
    default_threads = cv2.getNumThreads()
    print(f"{'model':<12}{'cv threads':>11}{'ours ms':>10}{'cv ms':>9}{'ratio':>8}"
          f"{'ours err px':>13}{'cv err px':>11}  target")
    targets = {"similarity": 1.0, "homography": 0.7}
    for model in MODELS:
        rng = np.random.default_rng([7, MODELS.index(model)])
        data = [make_matches(rng, model, n=1000, outliers=0.3)[:3] for _ in range(datasets)]
        for threads in (default_threads, 1):
            cv2.setNumThreads(threads)
            t_o, t_c, e_o, e_c = [], [], [], []
            for rep in range(reps):
                for h, src, dst in data:
                    t0 = time.perf_counter()
                    fit = ours(model, src, dst, rep)
                    t1 = time.perf_counter()
                    m, _ = opencv(model, src, dst)
                    t2 = time.perf_counter()
                    t_o.append(t1 - t0)
                    t_c.append(t2 - t1)
                    e_o.append(grid_transfer_error(h, fit.matrix, WIDTH, HEIGHT))
                    e_c.append(grid_transfer_error(h, m, WIDTH, HEIGHT))
            mo, mc = np.median(t_o) * 1e3, np.median(t_c) * 1e3
            eo, ec = np.median(e_o), np.median(e_c)
            tgt = targets.get(model)
            ok = mo / mc <= tgt and eo <= ec + 1e-3 if tgt is not None else True
            verdict = "" if tgt is None else f"<= {tgt:.1f}x {'PASS' if ok else 'MISS'}"
            print(f"{model:<12}{threads:>11d}{mo:>10.3f}{mc:>9.3f}{mo / mc:>8.2f}"
                  f"{eo:>13.4f}{ec:>11.4f}  {verdict}")
        cv2.setNumThreads(default_threads)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer trials and repetitions")
    args = ap.parse_args()
    print(f"numpy {np.__version__}, OpenCV {cv2.__version__}")
    accuracy(10 if args.quick else 50)
    speed(10 if args.quick else 60)


if __name__ == "__main__":
    main()
