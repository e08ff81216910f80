"""Stage 3c, dynamics: discretization and the checks of discretization claims; exact time responses, their horizon and their comparison."""
