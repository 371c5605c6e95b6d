"""Detector calibration from standards: ring patterns (Au, Al, any phase) and single-crystal zone patterns, and the calibration history."""
