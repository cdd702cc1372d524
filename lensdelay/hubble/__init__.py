"""H0 from measured delays, from one lens and from many.

One lens: delay curves against H0, the joint posterior, the mass sheet. Many lenses at
once: the hierarchical joint H0 with stellar kinematics, blinded.
"""

__all__: list[str] = []
