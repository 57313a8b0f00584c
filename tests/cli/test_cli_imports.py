"""The command line imports the numerical and file-format libraries only in the commands that
run: ``spikemeasure --help`` and every command's ``--help`` load none of them.

Each check runs in a fresh interpreter, so modules imported by other tests in this process
cannot hide or fake an import. The references are Python's own records: ``sys.modules``, and
the import log of ``python -X importtime``.
"""
import json
import subprocess
import sys

import pytest

HEAVY = ("numpy", "scipy", "neo", "matplotlib", "pynwb", "h5py", "nixio", "pandas")
HELP_ARGS = ([], ["--help"], ["--version"], ["measure", "--help"], ["inspect", "--help"],
             ["check", "--help"], ["accept", "--help"], ["columns", "--help"])


def heavy_modules_after(arg_lists: list[list[str]], first: str = "") -> dict[str, list[str]]:
    """Run the command line once per argument list in one fresh interpreter (after the
    statement `first`); after each, the libraries of :data:`HEAVY` loaded so far."""
    program = (
        "import json, sys\n"
        f"{first}\n"
        "from spikemeasure.cli import main\n"
        "loaded = {}\n"
        f"for args in {arg_lists!r}:\n"
        "    try:\n"
        "        main.main(args=args, prog_name='spikemeasure')\n"
        "    except SystemExit:\n"
        "        pass\n"
        f"    loaded[' '.join(args)] = sorted({{m.split('.')[0] for m in sys.modules}}"
        f" & set({list(HEAVY)!r}))\n"
        "print(json.dumps(loaded), file=sys.stderr)\n"
    )
    done = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True,
                          check=False)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stderr.strip().splitlines()[-1])


def test_help_of_every_command_imports_no_heavy_library():
    loaded = heavy_modules_after([list(args) for args in HELP_ARGS])
    assert loaded == {" ".join(args): [] for args in HELP_ARGS}


def test_probe_sees_an_import():
    # Control: the same probe reports numpy when it is imported, so an empty answer above
    # means "not imported", not "not looked for".
    loaded = heavy_modules_after([["--help"]], first="import numpy.linalg")
    assert loaded["--help"] == ["numpy"]


@pytest.mark.parametrize("args", [["--help"], ["measure", "--help"]])
def test_import_log_of_the_module_entry_point(args):
    # python -X importtime writes one line per module imported to stderr: the entry point
    # `python -m spikemeasure` (spikemeasure/__main__.py) imports none of HEAVY
    done = subprocess.run([sys.executable, "-X", "importtime", "-m", "spikemeasure", *args],
                          capture_output=True, text=True, check=False)
    assert done.returncode == 0, done.stderr[-2000:]
    imported = {line.rsplit("|", 1)[-1].strip().split(".")[0]
                for line in done.stderr.splitlines() if line.startswith("import time:")}
    assert "click" in imported  # the log is read right
    assert imported.isdisjoint(HEAVY), sorted(imported & set(HEAVY))


def test_numerical_libraries_start_with_one_thread_unless_told():
    """A command sets the thread counts of numpy's linear-algebra library to 1 before numpy
    loads (its products here are small; --jobs uses the cores) and keeps a count the
    environment sets. Checked on the process environment, which OpenBLAS and OpenMP read
    when they load (their documented variables OPENBLAS_NUM_THREADS and OMP_NUM_THREADS)."""
    program = (
        "import os, sys\n"
        "from spikemeasure.cli import main\n"
        "try:\n"
        "    main.main(args=['columns'], prog_name='spikemeasure')\n"
        "except SystemExit:\n"
        "    pass\n"
        "print(os.environ.get('OPENBLAS_NUM_THREADS'), os.environ.get('OMP_NUM_THREADS'),"
        " file=sys.stderr)\n"
    )
    import os

    clean = {k: v for k, v in os.environ.items()
             if k not in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")}
    done = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True,
                          env=clean, check=False)
    assert done.stderr.strip().splitlines()[-1] == "1 1"
    told = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True,
                          env={**clean, "OPENBLAS_NUM_THREADS": "3"}, check=False)
    assert told.stderr.strip().splitlines()[-1] == "3 1"
