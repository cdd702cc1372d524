"""Lensing physics: mass profiles, lenses, distances, delays, images, critical curves."""
