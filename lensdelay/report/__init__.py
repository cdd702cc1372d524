"""Text reports and figures, drawn from result objects only."""
