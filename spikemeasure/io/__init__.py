"""Reading recordings into sweeps."""
from .read import (DEFAULT_MAX_SWEEP_SAMPLES, LONG_SWEEP_SAMPLES, RECORDING_SUFFIXES,
                   TEXT_SUFFIXES, ChannelInfo, Recording, RecordingSearch, find_recordings,
                   is_temporary, read_recording, search_recordings)
