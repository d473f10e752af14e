"""shotcheck detector: evaluate impulse records and compare reduced- and full-level shots.

Public entry points
-------------------
Record, Channel
    The data model (:mod:`detector.record`).
read, write
    File formats by suffix (:mod:`detector.formats`).
evaluate_waveshape
    IEC 60060-1 wave-shape parameters (:mod:`detector.waveshape`).
"""

from ._validation import FormatError, RecordError, ShotcheckError
from .record import Channel, Record

__version__ = "0.1.0"

__all__ = ["Channel", "Record", "ShotcheckError", "RecordError", "FormatError", "__version__"]
