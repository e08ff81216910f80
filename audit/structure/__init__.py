"""Stage 3a, structure: orthogonal staircase, minimal realizations, hidden modes, transmission zeros."""
