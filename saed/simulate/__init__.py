"""Kinematic simulation: zone-axis patterns, double diffraction, HOLZ, rendering, zone maps, tilts;
the rings a phase gives in a polycrystalline pattern and where they lie on the detector (rings.py)."""

from saed.simulate.zone import ZonePattern, zone_pattern

__all__ = ["ZonePattern", "zone_pattern"]
