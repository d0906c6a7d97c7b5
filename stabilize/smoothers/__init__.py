"""Camera-path smoothers beyond the Gaussian of :mod:`stabilize.path`.

Each works on an encoded path (see :func:`stabilize.path.encode`), one row per frame, and takes
its time scale in seconds with the frame rate passed explicitly. :func:`stabilize.path.smooth_path`
is the entry point that dispatches to them. Import the modules themselves
(``stabilize.smoothers.kalman``, ``.l1``, ``.lockoff``): ``l1`` brings in SciPy's optimiser,
which a run that does not use it should not pay for in memory.
"""
