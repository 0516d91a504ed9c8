"""Readers and writers for spectra, concentration and absorptivity tables."""
