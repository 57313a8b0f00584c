"""spikemeasure: measure action potentials in current-clamp recordings."""
__version__ = "0.1.0"
