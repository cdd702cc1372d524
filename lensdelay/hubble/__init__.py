"""H0 from measured delays: delay curves against H0, the joint posterior, the mass sheet."""

__all__: list[str] = []
