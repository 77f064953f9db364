"""Random play: exact length and winner laws (modular), float64 with error bounds, Monte Carlo."""
