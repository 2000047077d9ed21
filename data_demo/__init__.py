"""Bundled demo scenario (synthetic data of the invented Sorrel-3 thruster)."""
