"""Per-plot dispersion: Clark–Evans R with edge corrections, the Monte Carlo test, quadrats."""
