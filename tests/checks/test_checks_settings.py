"""The [quality] and [regression] tables of the project file: values, defaults and errors.
Source: the TOML texts written here, with the values and messages they must give."""
from __future__ import annotations

import pytest

from spikemeasure.checks.settings import Tolerance, load_check_settings
from spikemeasure.config import ConfigError


class TestProjectFileSections:
    @pytest.mark.parametrize("text, expected", [
        ("[quality]\nmax_noise_mv = 1\n", "did you mean `max_baseline_noise_mv`"),
        ("[quality]\nmax_baseline_noise_mv = -1\n", "must be positive"),
        ("[quality]\nresting_range_mv = [-50, -80]\n", "LOW < HIGH"),
        ("[quality]\nmax_clipped_spikes = 0.5\n", "whole number"),
        ("[regresion]\nenabled = true\n", "did you mean [regression]"),
        ("[regression]\nenabled = 1\n", "true or false"),
        ("[regression.tolerances]\nthreshold_mV = 1\n", "did you mean `threshold_mv`"),
        ("[regression.tolerances]\nflags = 1\n", "compared exactly"),
        ("[regression.tolerances]\nhalf_width_ms = \"two\"\n", "percentage in quotes"),
        ("[regression.tolerances]\nhalf_width_ms = -0.1\n", "zero or positive"),
    ])
    def test_errors_name_the_file_and_key(self, tmp_path, text, expected):
        path = tmp_path / "spikemeasure.toml"
        path.write_text(text)
        with pytest.raises(ConfigError) as info:
            load_check_settings(path)
        assert str(path) in str(info.value) and expected in str(info.value)

    def test_accepted_folder_from_the_project_file_and_defaults(self, tmp_path):
        assert load_check_settings(None, base_dir=tmp_path).accepted_dir == tmp_path / "accepted"
        project = tmp_path / "lab" / "spikemeasure.toml"
        project.parent.mkdir()
        project.write_text('[regression]\naccepted_folder = "reference"\n'
                           '[regression.tolerances]\nthreshold_mv = 0.5\n'
                           'half_width_ms = "2%"\n')
        settings = load_check_settings(project)
        assert settings.accepted_dir == project.parent.resolve() / "reference"
        assert settings.tolerances == {"threshold_mv": Tolerance(0.5),
                                       "half_width_ms": Tolerance(0.02, relative=True)}

    def test_measure_accepts_a_file_with_check_sections(self, tmp_path):
        from spikemeasure.config import load_config

        path = tmp_path / "spikemeasure.toml"
        path.write_text("[measure]\nmin_rise_mv = 25\n[quality]\nmax_baseline_noise_mv = 1\n"
                        "[regression]\nenabled = false\n")
        assert load_config(path) == {"min_rise_mv": 25.0}
        settings = load_check_settings(path)
        assert settings.quality == {"max_baseline_noise_mv": 1.0} and not settings.compare
