"""Moved: samples -> the waveform file's contents is :mod:`shaper.jobs.waveform`, ``shaper
export`` is :mod:`shaper.jobs.reexport`. Kept only for :mod:`shaper.jobs.escalate`'s
import until it imports :mod:`shaper.jobs.waveform` (issue 33); import nothing from here.
"""

from shaper.jobs.waveform import make_waveform  # noqa: F401
