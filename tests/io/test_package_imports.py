"""Reading comes first: importing the reading package loads no later stage of the pipeline.

Each check runs in a fresh interpreter, so modules imported by other tests in this process
cannot hide or fake an import. The reference is Python's own record of loaded modules,
``sys.modules``.
"""
import json
import subprocess
import sys

LATER_STAGES = ("analysis", "tables", "run", "figures", "report", "checks", "cli")


def loaded_spikemeasure_modules(imports: tuple[str, ...]) -> list[str]:
    """Import ``imports`` in a new interpreter; return the spikemeasure modules then loaded."""
    program = (
        "import importlib, json, sys\n"
        f"for name in {list(imports)!r}:\n"
        "    importlib.import_module(name)\n"
        "print(json.dumps(sorted(m for m in sys.modules if m.startswith('spikemeasure'))))\n"
    )
    done = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True,
                          check=False)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


def later_stage_modules(loaded: list[str]) -> list[str]:
    """The modules of ``loaded`` in a package of a later stage."""
    return [m for m in loaded if m.startswith("spikemeasure.") and m.split(".")[1] in LATER_STAGES]


def test_reading_loads_no_later_stage():
    loaded = loaded_spikemeasure_modules(("spikemeasure.io",))
    assert "spikemeasure.io.sweep" in loaded and "spikemeasure.io.read" in loaded
    assert later_stage_modules(loaded) == [], loaded


def test_probe_sees_a_later_stage():
    # Control: the same probe reports the analysis modules when they are imported, so an
    # empty answer above means "not imported", not "not looked for".
    loaded = loaded_spikemeasure_modules(("spikemeasure.io", "spikemeasure.analysis.sweeps"))
    assert later_stage_modules(loaded) == ["spikemeasure.analysis", "spikemeasure.analysis.sweeps"]
