"""Lensing physics: mass profiles, lenses, distances, delays, images, critical curves.

Also the stellar kinematics a lens model predicts (:mod:`lensdelay.lensing.kinematics`).
"""

__all__: list[str] = []
