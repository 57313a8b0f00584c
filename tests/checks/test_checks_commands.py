"""The check and accept commands: exit codes, messages, and a lab's CI job run end to end.
Sources: the exit codes documented in docs/ci.md (and POSIX's 128 + N for a signal), and
docs/example-lab as a lab repository."""
from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path


from checks_support import ROOT, EXAMPLE, run, lab, sample_results, validate_junit
from spikemeasure.config import ConfigError


class TestCommandLine:
    def test_accept_then_check_without_a_project_file(self, sample_results, tmp_path,
                                                    monkeypatch):
        monkeypatch.chdir(tmp_path)
        results = str(sample_results)
        r = run(["accept", results])
        assert r.exit_code == 0, r.output
        assert (tmp_path / "accepted" / "spikes.csv").read_text() == \
            (sample_results / "spikes.csv").read_text()
        record = json.loads((tmp_path / "accepted" / "run.json").read_text())
        assert record["parameters"]["onset_rate_v_per_s"] == 20.0 and record["versions"]
        r = run(["check", results, "--junit", "report.xml"])
        assert r.exit_code == 0, r.output
        assert "passed" in r.output
        validate_junit((tmp_path / "report.xml").read_text())
        r = run(["check", results, "--json"])
        assert r.exit_code == 0
        assert json.loads(r.stdout)["passed"] is True

    def test_failures_exit_1_with_a_table(self, lab, tmp_path, monkeypatch):
        monkeypatch.chdir(tmp_path)
        (tmp_path / "spikemeasure.toml").write_text(
            "[quality]\nmax_baseline_noise_mv = 0.5\n[regression]\nenabled = false\n")
        r = run(["check", str(lab / "all")])
        assert r.exit_code == 1
        assert "noisy.nwb" in r.output and "max_baseline_noise_mv" in r.output
        assert "FAILED: 1 of" in r.output

    def test_stopped_while_measuring_exits_128_plus_the_signal(self, lab, tmp_path,
                                                               monkeypatch):
        # POSIX shell convention (common practice): a process ended by signal N exits 128 + N.
        import signal as signals

        from spikemeasure import run as runner

        def stopped(*args, **kwargs):
            raise runner.RunStopped(int(signals.SIGTERM))

        monkeypatch.setattr(runner, "measure_paths", stopped)
        monkeypatch.chdir(tmp_path)
        r = run(["check", str(lab / "samples"), "--out", str(tmp_path / "res")])
        assert r.exit_code == 128 + int(signals.SIGTERM)
        assert "Interrupted (SIGTERM): nothing was checked" in r.output
        assert "Traceback" not in r.output

    def test_input_errors_exit_2_without_traceback(self, lab, sample_results, tmp_path,
                                                  monkeypatch):
        monkeypatch.chdir(tmp_path)
        r = run(["check", str(tmp_path / "nowhere")])
        assert r.exit_code == 2 and "nowhere: no such folder" in r.output
        assert "Traceback" not in r.output
        r = run(["check", str(lab / "samples")])   # recordings, not tables
        assert r.exit_code == 2 and "spikes.csv: no such file" in r.output
        assert "--out" in r.output
        r = run(["check", str(sample_results)])   # nothing accepted yet
        assert r.exit_code == 2 and "accepted" in r.output
        (tmp_path / "accepted").mkdir()
        r = run(["check", str(sample_results)])   # an empty accepted folder
        assert r.exit_code == 2 and "accepted" in r.output and "spikemeasure accept" in r.output
        (tmp_path / "accepted").rmdir()
        (tmp_path / "spikemeasure.toml").write_text("[quality]\nmax_noise = 1\n")
        r = run(["check", str(sample_results)])
        assert r.exit_code == 2 and "spikemeasure.toml" in r.output and "max_noise" in r.output
        r = run(["accept", str(sample_results)])
        assert r.exit_code == 2 and "max_noise" in r.output
        r = run(["--debug", "check", str(sample_results)])
        assert r.exit_code == 1 and isinstance(r.exception, ConfigError)
        r = run(["check", "a", "b"])
        assert r.exit_code == 2 and "--out" in r.output

    def test_help_states_the_interface(self):
        r = run(["check", "--help"])
        assert r.exit_code == 0
        for text in ("--out", "--junit", "--json", "run's tables", "0 all passed"):
            assert text in r.output


def example_commands() -> list[list[str]]:
    """The `spikemeasure ...` commands of the example's CI job, in order."""
    import yaml

    job = yaml.safe_load((EXAMPLE / "ci-job.yml").read_text())
    (name, spec), = job.items()
    return [line.split()[1:] for line in spec["script"] if line.startswith("spikemeasure ")]


class TestExampleLab:
    """docs/example-lab/ as a lab repository: its CI job's commands pass; a broken recording
    in place of a good one makes them fail."""

    def run_job(self, folder: Path) -> subprocess.CompletedProcess:
        result = None
        for args in example_commands():
            result = subprocess.run([sys.executable, "-m", "spikemeasure", *args], cwd=folder,
                                    capture_output=True, text=True, timeout=300)
            if result.returncode != 0:
                break
        return result

    def test_docs_show_the_job_file(self):
        import re

        import yaml

        text = (ROOT / "docs" / "ci.md").read_text()
        block = re.search(r"```yaml\n(.*?)```", text, flags=re.S).group(1)
        assert yaml.safe_load(block) == yaml.safe_load((EXAMPLE / "ci-job.yml").read_text())

    def test_the_job_checks_and_passes_then_fails_on_a_broken_file(self, tmp_path):
        commands = example_commands()
        assert any(c[0] == "check" and "--junit" in c for c in commands)
        folder = tmp_path / "lab"
        shutil.copytree(EXAMPLE, folder, ignore=shutil.ignore_patterns("results"))
        result = self.run_job(folder)
        assert result.returncode == 0, result.stdout + result.stderr
        report = next(c[c.index("--junit") + 1] for c in commands if "--junit" in c)
        validate_junit((folder / report).read_text())

        sys.path.insert(0, str(folder))
        try:
            import make_recordings
        finally:
            sys.path.remove(str(folder))
        recordings = sorted((folder / "recordings").glob("*.nwb"))
        assert len(recordings) >= 2
        make_recordings.write_cell(recordings[0], noise_mv=1.5)   # a noisy recording
        result = self.run_job(folder)
        assert result.returncode == 1, result.stdout + result.stderr
        assert recordings[0].name in result.stdout
        assert "max_baseline_noise_mv" in result.stdout
        root = validate_junit((folder / report).read_text())
        failed = {c.get("classname") for c in root.iter("testcase")
                  if c.find("failure") is not None}
        assert failed == {recordings[0].name}
