"""Text reports and figures, drawn from result objects only."""

__all__: list[str] = []
