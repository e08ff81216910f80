"""Stage 4, evidence: frequency response, certified peak gain, Markov parameters, similarity, ball-arithmetic re-evaluation, the Evidence record."""
