"""One sub-package per job, between the pure statistics and the report.

``dispersion`` (per-plot Clark–Evans R, Monte Carlo test, quadrats), ``scales`` (K, L, g,
G, F, J with envelopes), ``change`` (plants between two dates), ``compare`` (groups of
plots) and ``validation`` (detections against reference points); ``habitat`` (covariates
and marks around each plot) and ``planning`` (monitoring design). Each job keeps its
computation apart from its table of columns (``columns.py``: CSV column lists and row
builders). Nothing here draws: figures are made in :mod:`ecoscan.report`.
"""
