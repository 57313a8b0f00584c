"""Running measurements over many recordings: the ``measure`` job, planned, executed and
recorded (see :mod:`spikemeasure.run.runner`); file discovery in
:mod:`spikemeasure.run.discovery`."""
from .cache import CACHE_FOLDER, OutcomeCache, file_sha256
from .execute import STOP_SIGNALS, RunStopped
from .folder import (CELLS_FILE, ERRORS_FILE, OWN_OUTPUTS, REPORT_FILE, RUN_RECORD_FILE,
                     SPIKES_FILE, SWEEPS_FILE)
from .outcome import INTERNAL_ERROR_STAGE, FileOutcome
from .record import RunRecord, RunSummary
from .runner import default_jobs, measure_paths
from .task import FIGURES_FOLDER, cell_figure_folder, measure_file

__all__ = ["measure_paths", "default_jobs", "measure_file", "file_sha256", "RunSummary",
           "RunRecord", "RunStopped", "OutcomeCache", "FileOutcome",
           "STOP_SIGNALS", "INTERNAL_ERROR_STAGE", "SPIKES_FILE", "SWEEPS_FILE", "CELLS_FILE",
           "ERRORS_FILE", "RUN_RECORD_FILE", "CACHE_FOLDER", "FIGURES_FOLDER", "REPORT_FILE",
           "OWN_OUTPUTS", "cell_figure_folder"]
