"""Published fixed-wavelength equations: what they imply, how far to trust them, results.

Capability layer: imports base and solve only (DEVELOPERS.md). ``published/`` holds the
shipped sets as data files (read by :mod:`mixsolve.io.equations_io`).
"""
