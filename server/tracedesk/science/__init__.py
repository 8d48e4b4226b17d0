"""Pure numerical core: calibration, tracing, fitting and resampling (numpy/scipy only, no I/O)."""
