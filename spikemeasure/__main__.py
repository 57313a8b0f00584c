"""``python -m spikemeasure``: the same as the ``spikemeasure`` command."""
from .cli import main

main()
