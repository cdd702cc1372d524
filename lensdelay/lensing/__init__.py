"""Lensing physics: mass profiles, lenses, distances, delays, images, critical curves."""

__all__: list[str] = []
