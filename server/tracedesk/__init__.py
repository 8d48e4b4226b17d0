"""Tracedesk: turn archived paper chart records into trustworthy numbers, as a team."""

__version__ = "0.1.0"
