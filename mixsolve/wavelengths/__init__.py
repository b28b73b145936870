"""Wavelength sets: figures of merit, checking a set, choosing a better one."""
