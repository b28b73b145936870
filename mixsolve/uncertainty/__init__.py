"""Uncertainty: the GUM budget, its inputs, Monte Carlo, sensitivities, volumetric ware and
cell corrections."""
