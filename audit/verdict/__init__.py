"""Stage 5, verdict: evidence combined into equivalent / different / inconclusive; single-model inspection; the sampled route for sparse models."""
