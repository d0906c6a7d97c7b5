"""Camera-path smoothers: pure functions of an encoded path, one row per frame.

Each works on a path in the parameterisation of :func:`stabilize.camera_path.encode` and takes
its time scale in seconds with the frame rate passed explicitly: ``gaussian``, ``kalman``,
``l1`` and ``lockoff``. :func:`stabilize.steady_path.smooth_path` dispatches to them. Import the
modules themselves (``stabilize.smoothers.kalman``, ``.l1`` …): ``l1`` brings in SciPy's
optimiser, which a run that does not use it should not pay for in memory.
"""

__all__: list[str] = []
