"""Shake figures: how much the camera shook, in pixels, degrees and hertz, and how steady the
output is.

Shake is the part of the camera path above ``shake_above_hz``: the path minus its zero-phase
low-pass (4th-order Butterworth run forward and backward, as ``scipy.signal.sosfiltfilt``
does it). Every
function takes the frame rate explicitly (``fps``, frames per second).

Time is real time: the rate the figures use is the mean rate of the frames' own timestamps
(:func:`frame_rate`), not the container's nominal rate, and a clip whose frame intervals are
irregular (:func:`timestamps_irregular`) or misses frames (:func:`frame_gaps`) has its path
resampled onto an even grid at that
rate before it is filtered or its spectrum taken (:func:`resample_even`).

Vibration faster than half the frame rate (propellers, motors) cannot be resolved from video:
it aliases to a lower frequency or blurs the frames. The figures here describe the motion the
frames sample, nothing faster.

Modules, each importing only those above it:

- :mod:`~stabilize.shake.filters`: the Butterworth low-pass run both ways and the Welch
  spectrum in numpy (``scipy.signal`` takes 0.8 s to import).
- :mod:`~stabilize.shake.timebase`: the real frame rate, even resampling, the shake low-pass.
- :mod:`~stabilize.shake.spectra`: Welch spectra, band powers, the dominant-peak test.
- :mod:`~stabilize.shake.stability`: stability scores, measurement noise, cropping and
  distortion.
- :mod:`~stabilize.shake.figures`: per-shot shake of a path and its figures.
- :mod:`~stabilize.shake.summary`: the summary block, the trust verdict, plain notes.

Everything public is re-exported here, so callers write ``shake.summarise(...)``.
"""

from .figures import (
    MIN_MEASURED_SHARE,
    OUTPUT_MIN_MEASURED_SHARE,
    axis_shake,
    path_figures,
    peak_to_peak,
    readout_path,
    shake_times,
)
from .spectra import (
    AXES,
    PEAK_BACKGROUND_BINS,
    PEAK_FALSE_ALARM,
    PEAK_MIN_GAIN,
    SHAKE_BANDS_HZ,
    axis_unit,
    band_key,
    band_powers,
    dominant_hz,
    peak_threshold,
    shake_peaks,
    shake_spectrum,
    welch_dof,
    welch_segment,
)
from .stability import (
    NOISE_FACTOR,
    NOISE_FLOOR_PX,
    correction_figures,
    measured_frames,
    motion_noise,
    output_motion,
    stability,
    stability_figures,
)
from .summary import (
    BRIGHTNESS_DRIFT_PX,
    ROUGH_SHARE,
    TRUST_LEVELS,
    UNRELIABLE_SHARE,
    summarise,
    trust_verdict,
    uncertainty_notes,
    unlogged_source_shake,
)
from .timebase import (
    GAP_FACTOR,
    IRREGULAR_SPREAD,
    RARE_GAPS,
    frame_gaps,
    frame_rate,
    missing_before,
    resample_even,
    shake_component,
    shake_filter_gain,
    timestamps_irregular,
)

__all__ = [
    "AXES",
    "BRIGHTNESS_DRIFT_PX",
    "GAP_FACTOR",
    "IRREGULAR_SPREAD",
    "MIN_MEASURED_SHARE",
    "NOISE_FACTOR",
    "NOISE_FLOOR_PX",
    "OUTPUT_MIN_MEASURED_SHARE",
    "PEAK_BACKGROUND_BINS",
    "PEAK_FALSE_ALARM",
    "PEAK_MIN_GAIN",
    "RARE_GAPS",
    "ROUGH_SHARE",
    "SHAKE_BANDS_HZ",
    "TRUST_LEVELS",
    "UNRELIABLE_SHARE",
    "axis_shake",
    "axis_unit",
    "band_key",
    "band_powers",
    "correction_figures",
    "dominant_hz",
    "frame_gaps",
    "frame_rate",
    "measured_frames",
    "missing_before",
    "motion_noise",
    "output_motion",
    "path_figures",
    "peak_threshold",
    "peak_to_peak",
    "readout_path",
    "resample_even",
    "shake_component",
    "shake_filter_gain",
    "shake_peaks",
    "shake_spectrum",
    "shake_times",
    "stability",
    "stability_figures",
    "summarise",
    "timestamps_irregular",
    "trust_verdict",
    "uncertainty_notes",
    "unlogged_source_shake",
    "welch_dof",
    "welch_segment",
]
