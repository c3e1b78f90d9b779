"""Synthetic permeability fields for demonstrations, tests and benchmarks."""

from .fields import channel_field, gaussian_field, layered_field, lognormal_field

__all__ = ["channel_field", "gaussian_field", "layered_field", "lognormal_field"]
