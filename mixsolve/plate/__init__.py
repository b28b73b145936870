"""Plates: well maths and one plate's analysis in memory."""
