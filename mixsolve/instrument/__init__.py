"""Instrument checks: absorbance scale, wavelength scale, stray light, repeatability."""
