"""Measurements on sweeps: spike detection, spikes, sweep and cell features (arrays in,
arrays out)."""
