"""The parameter declarations (spikemeasure/params.py) and everything made from them.

Sources of the expected answers: the ranges stated in each parameter's declaration, written
out here by hand (a value inside, one on each edge, one outside); the TOML parser of the
standard library (tomllib) for the examples; Python's own record of loaded modules
(sys.modules) for what `--help` imports; click's parsing of the generated options.
"""
import json
import math
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import spikemeasure as sm
from spikemeasure.cli import main
from spikemeasure.analysis.detection import DetectionSettings
from spikemeasure.errors import InvalidSettingError
from spikemeasure.params import (KINDS, PARAMETERS, SETTING_PARAMETERS, check_value,
                                 parameter, parameters_markdown, parameters_record)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

ROOT = Path(__file__).resolve().parents[1]

#: One value out of range (or of the wrong kind) per parameter, as the command line, the
#: project file and the API each take it, with the message every one of them must give.
OUT_OF_RANGE = {
    "onset_rate_v_per_s": ("-3", "-3", -3,
                           "`onset_rate_v_per_s` must be a positive number, in V/s (got -3)"),
    "lowest_peak_mv": ("nan", "nan", float("nan"),
                       "`lowest_peak_mv` must be a number, in mV (got nan)"),
    "threshold_fraction": ("1.5", "1.5", 1.5, "`threshold_fraction` must be a number between 0 "
                           "and 1, both excluded (got 1.5)"),
    "min_samples_across_width": ("0", "0", 0, "`min_samples_across_width` must be a whole "
                                 "number, 1 or more (got 0)"),
    "threshold_method": ("guess", '"guess"', "guess", "`threshold_method` must be one of "
                         "onset_rate, max_rate_fraction, second_derivative_peak (got 'guess')"),
    "step_s": (("0.5", "0.1"), "[0.5, 0.1]", (0.5, 0.1), "`step_s` must be two numbers START "
               "END, in s, with 0 <= START < END (got "),
    "step_sizes_pa": ("fifty", '"fifty"', "fifty", "`step_sizes_pa` must be text "
                      "\"FIRST:INCREMENT\", in pA, such as \"-100:20\", or two numbers "
                      "(got 'fifty')"),
    "sampling_rate_hz": ("0", "0", 0, "`sampling_rate_hz` must be a positive number, in Hz "
                         "(got 0)"),
    "max_sweep_samples": ("0", "0", None, "`max_sweep_samples` must be a whole number, 1 or "
                          "more (got 0)"),
}


def flat(text: str) -> str:
    """Text with every run of whitespace as one space (click wraps long lines)."""
    return " ".join(text.split())


class TestDeclarations:
    def test_every_default_passes_its_own_check(self):
        for p in PARAMETERS:
            if p.default is None:  # not given: the option is left out
                assert p.default_text, p.name
                continue
            assert check_value(p.name, p.default) == p.default
            assert type(check_value(p.name, p.default)) is p.python_type

    def test_every_example_parses_as_toml_and_passes_the_check(self):
        for p in PARAMETERS:
            value = tomllib.loads(f"{p.name} = {p.example}")[p.name]
            check_value(p.name, value)

    def test_names_carry_their_unit(self):
        suffix = {"V/s": "_v_per_s", "mV": "_mv", "ms": "_ms", "s": "_s", "pA": "_pa",
                  "Hz": "_hz"}
        for p in PARAMETERS:
            assert p.kind in KINDS
            assert p.option.startswith("--") and p.help and not p.help.endswith(".")
            if p.unit:
                assert p.name.endswith(suffix[p.unit]), p.name

    def test_settings_fields_are_the_declared_settings_in_order(self):
        fields = list(DetectionSettings.__dataclass_fields__)
        assert fields == [p.name for p in SETTING_PARAMETERS]
        defaults = DetectionSettings()
        for p in SETTING_PARAMETERS:
            assert getattr(defaults, p.name) == p.default

    def test_the_samples_limit_shown_is_the_readers(self):
        from spikemeasure.io import DEFAULT_MAX_SWEEP_SAMPLES

        assert parameter("max_sweep_samples").default_text == str(DEFAULT_MAX_SWEEP_SAMPLES)

    def test_unknown_name(self):
        with pytest.raises(InvalidSettingError, match="`onset_rate` is not a parameter.*"
                                                      "onset_rate_v_per_s"):
            parameter("onset_rate")


class TestCheckValue:
    @pytest.mark.parametrize("name, value, expected", [
        ("threshold_fraction", 0.5, 0.5),
        ("min_samples_across_width", 1, 1),
        ("min_samples_across_width", 3.0, 3),
        ("onset_rate_v_per_s", np.float64(20.0), 20.0),
        ("onset_rate_v_per_s", 30, 30.0),
        ("lowest_peak_mv", -1e6, -1e6),
        ("step_s", (0, 0.1), (0.0, 0.1)),
        ("step_s", [0.1, 0.6], (0.1, 0.6)),
        ("step_sizes_pa", "-100:20", (-100.0, 20.0)),
        ("step_sizes_pa", (-100, 20), (-100.0, 20.0)),
        ("max_sweep_samples", 10**9, 10**9),
    ])
    def test_valid_values_are_converted(self, name, value, expected):
        got = check_value(name, value)
        assert got == expected and type(got) is type(expected)

    @pytest.mark.parametrize("name, value", [
        ("threshold_fraction", 0.0), ("threshold_fraction", 1.0),
        ("onset_rate_v_per_s", 0.0), ("onset_rate_v_per_s", math.inf),
        ("onset_rate_v_per_s", True), ("onset_rate_v_per_s", "20"),
        ("min_samples_across_width", 2.5), ("min_samples_across_width", True),
        ("threshold_method", "Onset_Rate"),
        ("step_s", (0.1, 0.1)), ("step_s", (-0.1, 0.5)), ("step_s", "0.1 0.5"),
        ("step_s", (0.1, 0.5, 0.9)),
        ("step_sizes_pa", "-100"), ("step_sizes_pa", "-100:inf"), ("step_sizes_pa", (1,)),
        ("sampling_rate_hz", None),
    ])
    def test_edges_and_wrong_kinds_are_refused_naming_the_parameter(self, name, value):
        with pytest.raises(InvalidSettingError, match=f"^`{name}` must be "):
            check_value(name, value)


class TestSameMessageEverywhere:
    """A value out of range gives the parameter's one message from the API, the command line
    and the project file."""

    @pytest.fixture
    def lab(self, tmp_path, monkeypatch):
        from conftest import gaussian_train, write_text

        _, v = gaussian_train(20_000.0, [30.0], 100.0)
        write_text(tmp_path / "cell.txt", v)
        monkeypatch.chdir(tmp_path)
        return tmp_path

    @pytest.mark.parametrize("name", sorted(OUT_OF_RANGE))
    def test_command_line(self, lab, name):
        given, _, _, message = OUT_OF_RANGE[name]
        values = list(given) if isinstance(given, tuple) else [given]
        r = CliRunner().invoke(main, ["measure", "cell.txt", "--out", "o",
                                      parameter(name).option, *values])
        assert r.exit_code == 2, r.output
        assert message in flat(r.output) and parameter(name).option in r.output
        assert not (lab / "o").exists()

    @pytest.mark.parametrize("name", sorted(OUT_OF_RANGE))
    def test_project_file(self, lab, name):
        _, written, _, message = OUT_OF_RANGE[name]
        (lab / "spikemeasure.toml").write_text(f"[measure]\n{name} = {written}\n")
        r = CliRunner().invoke(main, ["measure", "cell.txt", "--out", "o"])
        assert r.exit_code == 2, r.output
        assert r.output.startswith("Error: spikemeasure.toml: [measure] ")
        assert message in flat(r.output) and f"for example {name} = " in r.output
        assert not (lab / "o").exists()

    @pytest.mark.parametrize("name", sorted(n for n in OUT_OF_RANGE if OUT_OF_RANGE[n][2]
                                            is not None))
    def test_api(self, lab, name):
        _, _, value, message = OUT_OF_RANGE[name]
        with pytest.raises(InvalidSettingError) as info:
            if name == "sampling_rate_hz":
                sm.measure_trace(np.zeros(100), value)
            else:
                sm.measure(lab / "cell.txt", **{name: value})
        assert message in str(info.value)


class TestOptions:
    @pytest.mark.parametrize("command", ["measure", "inspect"])
    def test_help_lists_every_parameter_with_its_unit_and_default(self, command):
        r = CliRunner().invoke(main, [command, "--help"])
        assert r.exit_code == 0
        text = r.output
        for p in PARAMETERS:
            start = text.index(f"  {p.option} ")
            end = text.find("\n  -", start + 1)
            entry = flat(text[start:end])
            if p.unit:
                assert f", in {p.unit}." in entry, entry
            shown = p.default_text if p.default is None else str(p.default)
            if shown != "none":
                assert f"[default: {shown}]" in entry, entry

    def test_group_help_imports_no_numerical_or_plotting_library(self):
        program = ("import sys\nfrom spikemeasure.cli import main\n"
                   "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
                   "heavy = ('numpy', 'scipy', 'neo', 'matplotlib', 'h5py')\n"
                   "print(sorted(m for m in sys.modules if m.split('.')[0] in heavy))\n")
        done = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True,
                              check=False)
        assert done.returncode == 0, done.stderr
        assert "Commands:" in done.stdout
        assert done.stdout.strip().splitlines()[-1] == "[]"

    def test_project_file_values_reach_the_run(self, tmp_path, monkeypatch):
        """Through default_map: the file's value where no option is given, the option's where
        one is; run.json records them under the declared names."""
        from conftest import gaussian_train, write_text

        _, v = gaussian_train(20_000.0, [30.0], 100.0)
        write_text(tmp_path / "cell.txt", v, with_time=False)
        (tmp_path / "spikemeasure.toml").write_text(
            "[measure]\nsampling_rate_hz = 20000\nstep_s = [0.02, 0.08]\n"
            'step_sizes_pa = "50:10"\nsmoothing_ms = 0.2\n')
        monkeypatch.chdir(tmp_path)
        r = CliRunner().invoke(main, ["measure", "cell.txt", "--out", "o", "--no-figures",
                                      "--smoothing", "0.25"])
        assert r.exit_code == 0, r.output
        record = json.loads((tmp_path / "o" / "run.json").read_text())["parameters"]
        assert list(record) == [p.name for p in PARAMETERS]
        assert record["sampling_rate_hz"] == 20000.0 and record["step_s"] == [0.02, 0.08]
        assert record["step_sizes_pa"] == [50.0, 10.0] and record["smoothing_ms"] == 0.25
        assert record["max_sweep_samples"] is None


class TestRecord:
    def test_record_in_declared_order_with_lists(self):
        record = parameters_record(DetectionSettings(onset_rate_v_per_s=30),
                                   {"step_s": (0.1, 0.6), "settings": {}})
        assert list(record) == [p.name for p in PARAMETERS]
        assert record["onset_rate_v_per_s"] == 30.0 and record["step_s"] == [0.1, 0.6]
        assert record["step_sizes_pa"] is None and record["max_sweep_samples"] is None
        assert json.loads(json.dumps(record)) == record


class TestDocs:
    def test_the_table_in_batch_md_is_current(self):
        docs = (ROOT / "docs" / "batch.md").read_text(encoding="utf-8")
        assert "<!-- generated from spikemeasure/params.py: parameters_markdown() -->" in docs
        assert parameters_markdown() in docs, \
            "regenerate the table in docs/batch.md from parameters_markdown()"

    def test_defaults_quoted_in_prose_are_the_declared_ones(self):
        """Where README.md or docs/*.md quote an option's default in prose ("`--opt` ...
        default 200 ms", "(`--opt`, 20 V/s by default)"), it is the default params.py declares
        (the parameter table's `default` column)."""
        by_option = {p.option: p for p in PARAMETERS}
        texts = [ROOT / "README.md"] + sorted((ROOT / "docs").glob("*.md"))
        pattern = re.compile(r"`(--[\w-]+)`[^`.;:]*?default ([-\d.]+)"
                             r"|`(--[\w-]+)`, ([-\d.]+) \S+ by\s+default")
        seen = set()
        for path in texts:
            text = " ".join(path.read_text(encoding="utf-8").split())
            for m in pattern.finditer(text):
                option, value = (m.group(1), m.group(2)) if m.group(1) else m.group(3, 4)
                declared = by_option[option]
                expected = declared.default if declared.default is not None \
                    else float(declared.default_text)
                assert float(value) == pytest.approx(expected), (path.name, option, value)
                seen.add(option)
        # the probe finds the quotes it is meant to check
        assert {"--max-sweep-samples", "--search-window", "--onset-rate"} <= seen

    def test_the_table_has_a_row_per_parameter(self):
        rows = [line for line in parameters_markdown().splitlines()[2:]]
        assert [re.match(r"\| `(\w+)` ", row).group(1) for row in rows] == \
            [p.name for p in PARAMETERS]
