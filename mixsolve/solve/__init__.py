"""Solvers: design matrices, classical least squares (OLS and NNLS), and the public ``unmix``."""
