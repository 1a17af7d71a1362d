"""Performance measures and their Monte Carlo errors (one place), exact mode, stopping rules."""
