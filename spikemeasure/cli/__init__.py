"""The command line (``spikemeasure``): the group in :mod:`.main`, one module per group of
commands, the parameter options made from :mod:`spikemeasure.params` in :mod:`.options`."""
from .main import main

__all__ = ["main"]
