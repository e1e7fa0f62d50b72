"""The numeric core: conversions, calibration maths, fixture removal, window, landmarks,
models, fitting and export formatting. Pure functions on numpy arrays; no I/O here."""
