"""Mapping: area of applicability of a fitted model (dissimilarity index)."""

from mlsites.mapping._applicability import DEFAULT_CHUNK_SIZE, ApplicabilityModel, mean_pairwise_distance

__all__ = [
    "ApplicabilityModel",
    "mean_pairwise_distance",
    "DEFAULT_CHUNK_SIZE",
]
