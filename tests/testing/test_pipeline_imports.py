"""The measuring pipeline does not import the simulated models.

Each check runs in a fresh interpreter, so modules imported by other tests in this process
(the simulations in the test files) cannot hide or fake an import.  The reference is
Python's own record of loaded modules, ``sys.modules``.
"""
from conftest import loaded_spikemeasure_modules

import pytest

PIPELINE = ("spikemeasure.run", "spikemeasure.tables.build", "spikemeasure.cli")


@pytest.mark.parametrize("module", PIPELINE)
def test_pipeline_module_does_not_import_testing(module):
    loaded = loaded_spikemeasure_modules((module,))
    assert module in loaded
    assert not [m for m in loaded if m == "spikemeasure.testing"
                or m.startswith("spikemeasure.testing.")], loaded


def test_whole_pipeline_together_does_not_import_testing():
    loaded = loaded_spikemeasure_modules(PIPELINE)
    assert not [m for m in loaded if m.startswith("spikemeasure.testing")], loaded


def test_probe_sees_an_import_of_testing():
    # Control: the same probe reports the subpackage and its modules when they are imported,
    # so an empty answer above means "not imported", not "not looked for".
    loaded = loaded_spikemeasure_modules(("spikemeasure.run", "spikemeasure.testing"))
    for name in ("spikemeasure.testing", "spikemeasure.testing.models",
                 "spikemeasure.testing.integration", "spikemeasure.testing.protocols"):
        assert name in loaded
