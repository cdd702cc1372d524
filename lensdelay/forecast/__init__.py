"""The forecast: per-sample images, the timing update, model combination, statuses, budget."""

__all__: list[str] = []
