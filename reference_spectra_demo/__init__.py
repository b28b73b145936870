"""Synthetic demo data (invented scenario); see README.md in this folder."""
