"""Streaming meters: sample peak, true peak (ITU-R BS.1770-4), RMS, DC offset, clipping, non-finite samples.

:class:`MeterBank` is the standard bank every file is metered with; :class:`Meter` is the
protocol each meter in it keeps (``update``, ``reading``, ``HEADLINE``).
"""
from .base import HEADLINE_FIELDS, ChannelReading, Meter, MeterBank, MeterReading

__all__ = ["Meter", "MeterBank", "MeterReading", "ChannelReading", "HEADLINE_FIELDS"]
