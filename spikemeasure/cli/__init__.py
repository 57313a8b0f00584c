"""The command line (``spikemeasure``)."""
from .main import main

__all__ = ["main"]
