"""The ``spikemeasure`` command: a thin layer over the Python API.

Exit codes of ``measure`` and ``inspect``: 0 everything was measured; 1 any file or sweep
failed (the rest were measured and errors.csv says what failed), or an error (also a write
that failed during the run, e.g. a full disk); 2 a usage error (a bad option, a bad option
value, a malformed or invalid project file, an --out that cannot be used); 128 + the signal's
number when stopped by a signal (130 Ctrl-C, 143 SIGTERM, 129 SIGHUP), after writing the
tables of the files finished.
``check`` and ``accept``: 0 all checks passed (or the results were accepted); 1 a check
failed; 2 a usage or input error (missing tables, a bad project file); 128 + the signal's
number when stopped by a signal while measuring (130 Ctrl-C, 143 SIGTERM, 129 SIGHUP).

Importing this module loads click and the parameter declarations only: numpy, scipy, neo and
matplotlib are imported by the commands that use them, so ``spikemeasure --help`` is quick.
"""
from __future__ import annotations

import os
import sys

import click

from .. import __version__
from .checking import accept, check
from .columns import columns
from .common import CliState
from .measuring import inspect, measure

__all__ = ["main", "SINGLE_THREAD_VARIABLES"]

#: The thread counts of the numerical libraries numpy and scipy may be built with. Their
#: matrices here are small (a fit's few columns, a spike's weights): spreading one product
#: over threads costs more processor time than it saves, and with --jobs the workers already
#: use the cores. Set to 1 when the command starts, unless the environment sets them.
SINGLE_THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="spikemeasure")
@click.option("--debug", is_flag=True, help="Show tracebacks for errors.")
@click.pass_context
def main(ctx: click.Context, debug: bool) -> None:
    """Measure action potentials in whole-cell current-clamp recordings.

    Reads NWB, NIX, plain text and other formats neo reads; writes CSV tables. Results need
    review by a qualified person; not for clinical decisions.
    """
    for name in SINGLE_THREAD_VARIABLES:  # before numpy is imported, by the command
        os.environ.setdefault(name, "1")
    ctx.obj = CliState(debug)


for _command in (measure, inspect, check, accept, columns):
    main.add_command(_command)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
