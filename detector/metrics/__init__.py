"""Comparison metrics of an aligned reference/test pair.

:mod:`.timedomain`
    Difference traces, noise floor, window deviations, deviation onset, voltage collapse.
:mod:`.transfer`
    Transfer function current/voltage with an exponential window and indices comparing two of them.
:mod:`.wavelet`
    Per-level wavelet difference of the two currents and the time of the first significant difference.
:mod:`.compensated`
    The test current against the current the reference winding would have drawn under the test voltage.
:mod:`.oscillation`
    Damped oscillations of the winding that start at an unknown instant in a difference trace.

All functions are pure: arrays (or an :class:`detector.preprocess.AlignedPair`) in, numbers and named
tuples out, SI units (per unit for normalised records).
"""

from .oscillation import OscillationScan, damped_oscillation_scan
from .timedomain import TimeDomainMetrics, time_domain_metrics, voltage_collapse
from .transfer import (
    DLT911_BANDS_HZ,
    R_MAX,
    TransferComparison,
    TransferFunction,
    compare_transfer,
    transfer_function,
)
from .wavelet import BoundaryEffectWarning, WaveletDifference, burst_counts, wavelet_difference

__all__ = [
    "DLT911_BANDS_HZ",
    "R_MAX",
    "BoundaryEffectWarning",
    "OscillationScan",
    "TimeDomainMetrics",
    "TransferComparison",
    "TransferFunction",
    "WaveletDifference",
    "burst_counts",
    "compare_transfer",
    "damped_oscillation_scan",
    "time_domain_metrics",
    "transfer_function",
    "voltage_collapse",
    "wavelet_difference",
]
