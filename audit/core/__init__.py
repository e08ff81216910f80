"""Stage 2, the numeric core: the immutable Realization, conversions between representations, evaluation of stored coefficients and factors."""
