"""Polycrystalline ring patterns: ring geometry, expected ring lines of a phase, matching and phase identification."""
