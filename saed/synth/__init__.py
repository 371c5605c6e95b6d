"""Synthetic diffraction patterns for tests, benchmarks and the demo."""
