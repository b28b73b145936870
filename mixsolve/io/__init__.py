"""Readers and writers: tables of spectra, standards sheets, library files, results."""
