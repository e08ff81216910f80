"""Stage 3a, structure: orthogonal staircase, state scaling, minimal realizations, Kalman decomposition, hidden modes, mode coupling, transmission zeros."""
