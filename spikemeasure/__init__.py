"""spikemeasure: measure action potentials in current-clamp recordings."""
__version__ = "0.2.0"
