"""The project file spikemeasure.toml: reading, checking, precedence and the run record.

Source of the expected answers: the file format and precedence rules stated in
spikemeasure/config.py (command line > file > DetectionSettings defaults); every file here is
written by the test, so the expected values are known before the code runs.
"""
import json
from dataclasses import replace

import pytest

from spikemeasure import config
from spikemeasure.config import (CONFIG_FILE_NAME, KNOWN_KEYS, ConfigError, RunParameters,
                                 find_config_file, load_config, merge_parameters)
from spikemeasure.analysis.detection import THRESHOLD_METHODS, DetectionSettings
from spikemeasure.errors import InvalidSettingError, SpikemeasureError

DEFAULTS = DetectionSettings()


def write_config(folder, text, name=CONFIG_FILE_NAME):
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def load_error(tmp_path, text) -> str:
    path = write_config(tmp_path, text)
    with pytest.raises(ConfigError) as info:
        load_config(path)
    message = str(info.value)
    assert str(path) in message, "every message names the file"
    return message


class TestPrecedence:
    def test_defaults_without_file_or_options(self):
        run = merge_parameters({}, {}, None)
        assert run.settings == DEFAULTS
        assert (run.step_s, run.step_sizes_pa, run.sampling_rate_hz, run.config_file) == (
            None, None, None, None)

    def test_file_over_defaults_and_command_line_over_file(self, tmp_path):
        # every value differs from the default, so each source is visible in the result
        path = write_config(tmp_path, """
            [measure]
            onset_rate_v_per_s = 30
            min_rise_mv = 15.0
            threshold_method = "max_rate_fraction"
            step_s = [0.1, 0.6]
            step_sizes_pa = "-100:20"
            sampling_rate_hz = 10000
            """)
        file_values = load_config(path)
        cli_values = {"onset_rate_v_per_s": 45.0, "sampling_rate_hz": 50000.0}
        run = merge_parameters(file_values, cli_values, str(path))

        assert run.settings.onset_rate_v_per_s == 45.0        # command line
        assert run.settings.min_rise_mv == 15.0               # file
        assert run.settings.threshold_method == "max_rate_fraction"  # file
        assert run.settings.lowest_peak_mv == DEFAULTS.lowest_peak_mv  # default
        assert run.settings.peak_window_ms == DEFAULTS.peak_window_ms  # default
        assert run.step_s == (0.1, 0.6)                   # file
        assert run.step_sizes_pa == (-100.0, 20.0)               # file, parsed
        assert run.sampling_rate_hz == 50000.0                # command line
        assert run.config_file == str(path)

    def test_loaded_values_are_converted(self, tmp_path):
        path = write_config(tmp_path, "[measure]\nonset_rate_v_per_s = 30\n"
                                      "min_samples_across_width = 5\n")
        values = load_config(path)
        assert values == {"onset_rate_v_per_s": 30.0, "min_samples_across_width": 5}
        assert type(values["onset_rate_v_per_s"]) is float
        assert type(values["min_samples_across_width"]) is int

    def test_command_line_step_with_file_step_sizes(self, tmp_path):
        path = write_config(tmp_path, '[measure]\nstep_sizes_pa = "-50:10"\n')
        run = merge_parameters(load_config(path), {"step_s": (0.2, 0.8)}, str(path))
        assert run.step_s == (0.2, 0.8)
        assert run.step_sizes_pa == (-50.0, 10.0)

    def test_command_line_step_sizes_as_text_or_pair(self):
        for given in ("-100:25", (-100.0, 25.0)):
            run = merge_parameters({}, {"step_s": (0.1, 0.5), "step_sizes_pa": given}, None)
            assert run.step_sizes_pa == (-100.0, 25.0)

    def test_none_counts_as_not_given(self):
        run = merge_parameters({"onset_rate_v_per_s": 30.0},
                               {"onset_rate_v_per_s": None, "step_s": None}, "lab.toml")
        assert run.settings.onset_rate_v_per_s == 30.0
        assert run.step_s is None

    def test_empty_file_gives_nothing(self, tmp_path):
        assert load_config(write_config(tmp_path, "# no settings yet\n")) == {}


class TestUnknownKeys:
    def test_unknown_key_is_named_with_suggestion_and_known_keys(self, tmp_path):
        message = load_error(tmp_path, "[measure]\nonset_rate = 30\n")
        assert "`onset_rate`" in message
        assert "did you mean `onset_rate_v_per_s`" in message
        for key in KNOWN_KEYS:
            assert key in message

    def test_unknown_key_without_close_match(self, tmp_path):
        message = load_error(tmp_path, "[measure]\ncolour = 'red'\n")
        assert "`colour`" in message
        assert "did you mean" not in message

    def test_unknown_section(self, tmp_path):
        message = load_error(tmp_path, "[detect]\nonset_rate_v_per_s = 30\n")
        assert "`detect`" in message
        assert "[measure]" in message

    def test_key_outside_the_table(self, tmp_path):
        message = load_error(tmp_path, "min_rise_mv = 10\n[measure]\n")
        assert "`min_rise_mv`" in message
        assert "under [measure]" in message

    def test_measure_must_be_a_table(self, tmp_path):
        message = load_error(tmp_path, "measure = 3\n")
        assert "must be a table" in message

    def test_merge_rejects_unknown_names(self):
        with pytest.raises(InvalidSettingError, match="`onset_rate`.*onset_rate_v_per_s"):
            merge_parameters({}, {"onset_rate": 3.0}, None)


class TestTypes:
    @pytest.mark.parametrize("text, key, expected", [
        ('onset_rate_v_per_s = "20"', "onset_rate_v_per_s", "a positive number"),
        ("min_rise_mv = true", "min_rise_mv", "a positive number"),
        ("sampling_rate_hz = false", "sampling_rate_hz", "a positive number"),
        ('lowest_peak_mv = "low"', "lowest_peak_mv", "a number, in mV"),
        ("min_samples_across_width = 3.5", "min_samples_across_width", "a whole number"),
        ("min_samples_across_width = true", "min_samples_across_width", "a whole number"),
        ("threshold_method = 1", "threshold_method", "one of onset_rate, max_rate_fraction"),
        ("step_s = 0.1", "step_s", "two numbers START END"),
        ("step_s = [0.1, 0.2, 0.3]", "step_s", "two numbers START END"),
        ("step_s = [0.1, true]", "step_s", "two numbers START END"),
        ("step_sizes_pa = [-100]", "step_sizes_pa", "FIRST:INCREMENT"),
        ('step_sizes_pa = "-100"', "step_sizes_pa", "FIRST:INCREMENT"),
    ])
    def test_wrong_type_names_file_key_and_expectation(self, tmp_path, text, key, expected):
        message = load_error(tmp_path, f"[measure]\n{text}\n")
        assert f"`{key}`" in message
        assert expected in message
        assert f"for example {key} = " in message

    def test_bool_in_file_values_rejected_at_merge(self):
        with pytest.raises(ConfigError, match="lab.toml.*`min_rise_mv`.*a positive number"):
            merge_parameters({"min_rise_mv": True}, {}, "lab.toml")


class TestValues:
    def test_negative_onset_rate(self, tmp_path):
        message = load_error(tmp_path, "[measure]\nonset_rate_v_per_s = -5\n")
        assert "`onset_rate_v_per_s`" in message
        assert "positive" in message
        assert isinstance(ConfigError(), SpikemeasureError)

    def test_unknown_threshold_method_lists_the_methods(self, tmp_path):
        message = load_error(tmp_path, '[measure]\nthreshold_method = "steepest"\n')
        assert "`threshold_method`" in message
        assert "'steepest'" in message
        for method in THRESHOLD_METHODS:
            assert method in message

    def test_inconsistent_keys_in_file(self, tmp_path):
        message = load_error(tmp_path, "[measure]\nsmoothing_ms = 6.0\n")
        assert "`smoothing_ms`" in message

    def test_keys_valid_together_are_accepted(self, tmp_path):
        # alone, peak_window_ms = 0.2 conflicts with the default 0.3 ms smoothing
        path = write_config(tmp_path, "[measure]\npeak_window_ms = 0.2\nsmoothing_ms = 0.1\n")
        assert load_config(path) == {"peak_window_ms": 0.2, "smoothing_ms": 0.1}

    @pytest.mark.parametrize("text, key", [
        ("step_s = [0.5, 0.1]", "step_s"),
        ("step_s = [-0.1, 0.5]", "step_s"),
        ('step_sizes_pa = "-100"', "step_sizes_pa"),
        ("sampling_rate_hz = 0", "sampling_rate_hz"),
        ("sampling_rate_hz = inf", "sampling_rate_hz"),
        ("threshold_fraction = 1.5", "threshold_fraction"),
    ])
    def test_run_option_values(self, tmp_path, text, key):
        message = load_error(tmp_path, f"[measure]\n{text}\n")
        assert f"`{key}`" in message

    def test_conflict_between_file_and_command_line_names_both(self, tmp_path):
        path = write_config(tmp_path, "[measure]\npeak_window_ms = 1.0\n")
        with pytest.raises(ConfigError) as info:
            merge_parameters(load_config(path), {"smoothing_ms": 2.0}, str(path))
        message = str(info.value)
        assert f"`peak_window_ms` from {path}" in message
        assert "`smoothing_ms` from the command line" in message

    def test_conflict_on_the_command_line_alone_is_not_blamed_on_the_file(self):
        with pytest.raises(InvalidSettingError) as info:
            merge_parameters({"min_rise_mv": 10.0}, {"smoothing_ms": 6.0}, "lab.toml")
        assert not isinstance(info.value, ConfigError)
        assert "lab.toml" not in str(info.value)
        assert "`smoothing_ms` from the command line" in str(info.value)

    def test_file_step_sizes_without_any_step_times(self, tmp_path):
        path = write_config(tmp_path, '[measure]\nstep_sizes_pa = "-100:20"\n')
        with pytest.raises(ConfigError, match="`step_sizes_pa`.*needs the step times `step_s`"):
            merge_parameters(load_config(path), {}, str(path))

    def test_command_line_step_sizes_without_step_times(self):
        with pytest.raises(InvalidSettingError) as info:
            merge_parameters({}, {"step_sizes_pa": "-100:20"}, None)
        assert not isinstance(info.value, ConfigError)


class TestReading:
    def test_syntax_error_gives_the_line(self, tmp_path):
        message = load_error(tmp_path, "[measure]\nmin_rise_mv = 10\nonset_rate_v_per_s = = 3\n")
        assert "not valid TOML at line 3" in message

    def test_unquoted_text_gives_the_line(self, tmp_path):
        message = load_error(tmp_path, "\n[measure]\nthreshold_method = onset_rate\n")
        assert "not valid TOML at line 3" in message
        assert "text values need quotes" in message

    def test_missing_file(self, tmp_path):
        path = tmp_path / CONFIG_FILE_NAME
        with pytest.raises(ConfigError, match="cannot read"):
            load_config(path)

    def test_not_utf8(self, tmp_path):
        path = tmp_path / CONFIG_FILE_NAME
        path.write_bytes(b"[measure]\n# caf\xe9\n")
        with pytest.raises(ConfigError, match="UTF-8"):
            load_config(path)

    def test_without_a_toml_parser(self, tmp_path, monkeypatch):
        # what Python 3.10 without tomli sees
        monkeypatch.setattr(config, "tomllib", None)
        with pytest.raises(ConfigError, match="tomli"):
            load_config(write_config(tmp_path, "[measure]\n"))


class TestFindConfigFile:
    def test_first_folder_holding_the_file(self, tmp_path):
        path = write_config(tmp_path, "[measure]\n")
        assert find_config_file([tmp_path]) == path
        assert find_config_file([str(tmp_path)]) == path

    def test_folder_without_the_file(self, tmp_path):
        assert find_config_file([tmp_path]) is None

    def test_file_argument_gives_nothing(self, tmp_path):
        write_config(tmp_path, "[measure]\n")
        recording = tmp_path / "cell1.txt"
        recording.write_text("0 -65\n")
        assert find_config_file([recording]) is None

    def test_file_arguments_are_passed_over_for_the_first_folder(self, tmp_path):
        recording = tmp_path / "cell1.txt"
        recording.write_text("0 -65\n")
        folder = tmp_path / "day2"
        folder.mkdir()
        path = write_config(folder, "[measure]\n")
        assert find_config_file([recording, folder]) == path

    def test_only_the_first_folder(self, tmp_path):
        first, second = tmp_path / "a", tmp_path / "b"
        first.mkdir()
        second.mkdir()
        write_config(second, "[measure]\n")
        assert find_config_file([first, second]) is None
        assert find_config_file([second, first]) == second / CONFIG_FILE_NAME

    def test_not_recursive(self, tmp_path):
        sub = tmp_path / "cells"
        sub.mkdir()
        write_config(sub, "[measure]\n")
        assert find_config_file([tmp_path]) is None

    def test_folder_named_like_the_file_is_not_a_file(self, tmp_path):
        (tmp_path / CONFIG_FILE_NAME).mkdir()
        assert find_config_file([tmp_path]) is None

    def test_no_paths(self):
        assert find_config_file([]) is None

    def test_missing_paths_are_passed_over(self, tmp_path):
        assert find_config_file([tmp_path / "missing"]) is None
        path = write_config(tmp_path, "[measure]\n")
        assert find_config_file([tmp_path / "missing", tmp_path]) == path


class TestRunRecord:
    def test_as_dict_round_trip_through_json(self):
        run = RunParameters(
            settings=replace(DEFAULTS, onset_rate_v_per_s=33.0, threshold_method="max_rate_fraction",
                             min_samples_across_width=4),
            step_s=(0.1, 0.6), step_sizes_pa=(-100.0, 20.0), sampling_rate_hz=20000.0,
            config_file="spikemeasure.toml")
        record = json.loads(json.dumps(run.as_dict()))
        assert RunParameters.from_dict(record) == run

    def test_as_dict_round_trip_without_run_options(self):
        run = merge_parameters({}, {}, None)
        assert RunParameters.from_dict(json.loads(json.dumps(run.as_dict()))) == run

    def test_as_dict_layout(self):
        run = merge_parameters({}, {"step_s": (0.1, 0.6), "step_sizes_pa": "-100:20"}, "a.toml")
        d = run.as_dict()
        assert list(d) == list(KNOWN_KEYS) + ["config_file"]
        assert d["step_s"] == [0.1, 0.6]
        assert d["step_sizes_pa"] == [-100.0, 20.0]
        assert d["onset_rate_v_per_s"] == DEFAULTS.onset_rate_v_per_s
        assert d["config_file"] == "a.toml"

    def test_file_keys_are_the_record_keys(self, tmp_path):
        # a record's parameters, minus config_file, can be pasted back into [measure]
        run = merge_parameters({}, {"step_s": (0.1, 0.6), "sampling_rate_hz": 1e4}, None)
        lines = ["[measure]"]
        for key, value in run.as_dict().items():
            if key == "config_file" or value is None:
                continue
            lines.append(f"{key} = {json.dumps(value)}")
        values = load_config(write_config(tmp_path, "\n".join(lines) + "\n"))
        assert merge_parameters(values, {}, None) == run

    def test_from_dict_rejects_unknown_keys(self):
        with pytest.raises(InvalidSettingError, match="'onset'"):
            RunParameters.from_dict({"onset": 1.0})
