"""Kinematic simulation: zone-axis patterns, double diffraction, HOLZ, rendering, zone maps, tilts."""
