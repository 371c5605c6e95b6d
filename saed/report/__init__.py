"""Output: JSON/CSV writers, overlay pictures and HTML reports (matplotlib imported inside functions)."""
