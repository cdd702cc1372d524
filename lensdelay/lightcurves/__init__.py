"""Delays measured from the images' light curves.

Quasars: a damped random walk shared by the images; supernovae: a parametric shape per
band; and a model-free cross-check.
"""

__all__: list[str] = []
