"""Reading comes first: importing the reading package loads no later stage of the pipeline.

Each check runs in a fresh interpreter, so modules imported by other tests in this process
cannot hide or fake an import. The reference is Python's own record of loaded modules,
``sys.modules``.
"""
from conftest import loaded_spikemeasure_modules

LATER_STAGES = ("analysis", "tables", "run", "figures", "report", "checks", "cli")


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
    assert later_stage_modules(loaded) == ["spikemeasure.analysis", "spikemeasure.analysis.epochs",
                                           "spikemeasure.analysis.sweeps"]
