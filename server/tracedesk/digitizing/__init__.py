"""Digitizing: sheet calibrations, traces (manual and automatic), fits, resampled data and period summaries."""
