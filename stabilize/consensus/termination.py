"""Adaptive termination: how many random samples are enough.

References
----------
.. [1] M. A. Fischler and R. C. Bolles, "Random sample consensus: a paradigm for model
   fitting with applications to image analysis and automated cartography",
   Communications of the ACM, 1981.
.. [2] R. Hartley and A. Zisserman, "Multiple View Geometry in Computer Vision",
   2nd ed., Cambridge University Press, 2004, section 4.7.1.
"""

from __future__ import annotations

import math

__all__ = ["rounds_needed", "next_batch_size"]

#: Smallest and largest number of hypotheses drawn, solved and scored together.
MIN_BATCH = 8
MAX_BATCH = 64
#: Outlier share assumed before any model is known; only sizes the first batch.
FIRST_GUESS_OUTLIERS = 1.0 / 3.0


def rounds_needed(
    outlier_ratio: float = 0.2, sample_size: int = 4, confidence: float = 0.99
) -> int | float:
    """Number of random samples needed to draw one outlier-free sample.

    ``N = ceil(log(1 - p) / log(1 - w**s))`` with inlier share ``w = 1 - outlier_ratio``.

    Parameters
    ----------
    outlier_ratio : float
        Share of correspondences that are outliers, in [0, 1].
    sample_size : int
        Size ``s`` of a minimal sample (>= 1).
    confidence : float
        Probability ``p`` in (0, 1) that at least one sample is outlier free.

    Returns
    -------
    int or float
        Rounds needed (>= 1). ``math.inf`` when no sample can be outlier free
        (``outlier_ratio == 1``) or ``w**s`` underflows to zero.

    References
    ----------
    .. [1] Fischler and Bolles, "Random sample consensus", CACM, 1981.
    .. [2] Hartley and Zisserman, "Multiple View Geometry in Computer Vision", 2nd ed.,
       2004, eq. (4.18) and Table 4.3.

    Examples
    --------
    >>> rounds_needed(0.2, 4, 0.99)
    9
    """
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be in (0, 1), got {confidence!r}")
    if sample_size < 1:
        raise ValueError(f"sample_size must be >= 1, got {sample_size!r}")
    if not 0.0 <= outlier_ratio <= 1.0:
        raise ValueError(f"outlier_ratio must be in [0, 1], got {outlier_ratio!r}")
    good = (1.0 - outlier_ratio) ** sample_size
    if good >= 1.0:
        return 1
    if good <= 0.0:
        return math.inf
    # log1p keeps precision when w**s is tiny (many outliers, large samples).
    n = math.log(1.0 - confidence) / math.log1p(-good)
    # Guard against ceil() jumping a whole round on float noise (e.g. 8.000000000001).
    return max(1, math.ceil(n - 1e-9))


def next_batch_size(rounds: int, needed: int | float, max_rounds: int, have_model: bool) -> int:
    """Hypotheses to draw in the next batch (0 means stop).

    Before any model is known the batch is sized for a typical outlier share, so the
    first batch usually suffices; later batches draw only what termination still needs
    (at least ``MIN_BATCH`` while nothing has been found).
    """
    left = max_rounds - rounds
    if left <= 0:
        return 0
    if have_model:
        want = needed - rounds
        if want <= 0:
            return 0
        return int(min(left, MAX_BATCH, want))
    return int(min(left, MAX_BATCH, max(MIN_BATCH, needed)))
