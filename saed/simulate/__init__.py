"""Kinematic simulation: zone-axis patterns, double diffraction, HOLZ, rendering, zone maps, tilts."""

from saed.simulate.zone import ZonePattern, zone_pattern

__all__ = ["ZonePattern", "zone_pattern"]
