"""Measuring imports neither scipy.signal nor scipy.stats: each costs a run about a quarter of
its memory and half a second of processor time at start (docs/benchmark.md), and measuring
needs from them only the Savitzky-Golay weights and filter (written in
``analysis/detection.py``, equal to scipy.signal's to the last bit:
tests/analysis/test_detection.py) and a chi-square quantile (``scipy.special.chdtri``).

The check runs in a fresh interpreter, so modules imported by other tests in this process
cannot hide or fake an import; the reference is Python's own record, ``sys.modules``.
"""
import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
UNWANTED = ("scipy.signal", "scipy.stats")


def test_measuring_a_file_imports_neither_scipy_signal_nor_stats(tmp_path):
    # after measuring, the same record is read again once scipy.signal is imported (the
    # control: it then lists both, so an empty answer means "not imported", not "not
    # looked for")
    unwanted = f"sorted(m for m in sys.modules if m in {list(UNWANTED)!r})"
    program = (
        "import json, sys\n"
        "from spikemeasure.run import measure_paths\n"
        f"summary = measure_paths([{str(ROOT / 'sample_data' / 'region_a_cell_1.nwb')!r}], "
        f"{str(tmp_path / 'out')!r}, force=True, jobs=1)\n"
        f"measured = {unwanted}\n"
        "import scipy.signal\n"
        f"print(json.dumps({{'spikes': summary.spikes, 'measured': measured, "
        f"'control': {unwanted}}}))\n"
    )
    done = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True,
                          check=False)
    assert done.returncode == 0, done.stderr
    found = json.loads(done.stdout.strip().splitlines()[-1])
    assert found["spikes"] > 0  # the spike measurements and their SDs ran
    assert found["measured"] == [], found["measured"]
    assert found["control"] == sorted(UNWANTED)
