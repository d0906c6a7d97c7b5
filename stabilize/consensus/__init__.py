"""Robust estimation of 2-D motion between matched points (RANSAC family).

Organised along the stages of the USAC framework: :mod:`.sampling`, minimal solvers
and refits in :mod:`.models`, :mod:`.scoring` (MSAC), :mod:`.degeneracy`,
:mod:`.local_opt` (LO-RANSAC) and :mod:`.termination`; :mod:`.estimator` runs them.

References
----------
.. [1] R. Raguram, O. Chum, M. Pollefeys, J. Matas and J.-M. Frahm, "USAC: A Universal
   Framework for Random Sample Consensus", IEEE TPAMI, 2013.
"""

from .degeneracy import MotionBounds
from .estimator import Fit, estimate
from .metrics import grid_transfer_error
from .models import MODELS
from .termination import rounds_needed

__all__ = ["estimate", "rounds_needed", "Fit", "MODELS", "MotionBounds", "grid_transfer_error"]
