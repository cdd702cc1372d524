"""Inference: likelihoods, the timing model, fitting, sampling and its coordinates and moves."""

__all__: list[str] = []
