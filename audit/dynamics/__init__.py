"""Stage 3c, dynamics: discretization and exact time responses."""
