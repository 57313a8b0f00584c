"""The analysis modules split by what they measure: each part imports nothing of the module
that gathers it and no analysis module imports itself through others (imports flow one way),
and the names moved stay importable from where they were.

The imports are read from the sources with Python's own parser (``ast``); whether a name is
the moved object itself, with the ``is`` operator.
"""
import ast
import importlib
from pathlib import Path

import pytest

from spikemeasure import analysis

# part -> (the module that gathers it and re-exports its names, names moved out of that module)
PARTS = {
    "sweep_passive": ("sweep_features", ("PassiveResponse", "passive_response", "passive_voltage",
                                         "MIN_WINDOW_MS", "TROUGH_WINDOW_FRACTION",
                                         "SAG_NOISE_FACTOR", "STEADY_STATE_WINDOW_MS")),
    "cell_passive": ("cell_features", ("input_resistance", "input_resistance_sd",
                                       "passive_sweeps", "MAX_RESIDUAL_TO_NOISE",
                                       "MAX_TAU_SD_FRACTION",
                                       "NOISE_FLOOR_MV", "SLOW_SWEEP_MAX_RISE_MV",
                                       "MAX_FLUCTUATION_TO_DEFLECTION")),
    "noise_model": ("spike_uncertainty", ("NoiseModel", "quiet_stretch", "measured_noise",
                                          "MIN_QUIET_MS", "MAX_QUIET_MS", "SPIKE_CLEARANCE_MS")),
    "span_search": ("spike_features", ()),
}


def analysis_imports() -> dict[str, set[str]]:
    """Each module of the analysis package -> the analysis modules it imports, read from its
    source with Python's own parser (``ast``)."""
    folder = Path(analysis.__file__).parent
    graph = {}
    for path in folder.glob("*.py"):
        found = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.level == 1 and node.module:
                found.add(node.module.split(".")[0])
        graph[path.stem] = found
    return graph


def reachable(graph: dict[str, set[str]], start: str) -> set[str]:
    """The modules `start` imports, directly or through others."""
    seen, todo = set(), list(graph[start])
    while todo:
        name = todo.pop()
        if name not in seen:
            seen.add(name)
            todo.extend(graph.get(name, ()))
    return seen


def test_no_import_cycle_within_analysis():
    graph = analysis_imports()
    assert set(PARTS) <= set(graph)
    assert [name for name in graph if name in reachable(graph, name)] == []


@pytest.mark.parametrize("part", sorted(PARTS))
def test_part_imports_nothing_that_gathers_it(part):
    graph = analysis_imports()
    assert PARTS[part][0] not in reachable(graph, part)
    # control: the gathering module does import its part, so the answer above is not empty
    # for want of looking
    assert part in reachable(graph, PARTS[part][0])


@pytest.mark.parametrize("part", sorted(PARTS))
def test_moved_names_importable_from_where_they_were(part):
    gatherer, names = PARTS[part]
    old = importlib.import_module(f"spikemeasure.analysis.{gatherer}")
    new = importlib.import_module(f"spikemeasure.analysis.{part}")
    for name in names:
        assert getattr(old, name) is getattr(new, name), name
        assert name in old.__all__ and name in new.__all__, name
