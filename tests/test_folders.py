"""Report folders under concurrency and kills: a lock that dies with its process, an
atomic swap, and leftovers of killed runs cleaned by the next run."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from trapbudget.sensitivity.errors import UsageError
from trapbudget.sensitivity.io import (
    FolderBusyError,
    clean_leftovers,
    folder_lock,
    replace_folder,
    scratch_name,
)


def _folder(path: Path, text: str) -> Path:
    path.mkdir(parents=True)
    (path / "study.json").write_text(text)
    return path


def test_a_second_writer_is_told_at_once_and_the_lock_dies_with_its_holder(tmp_path):
    out = tmp_path / "report"
    with folder_lock(out):
        # flock locks belong to open file descriptions: a second open conflicts, even here
        with pytest.raises(FolderBusyError, match=r"another trapbudget run is writing"):
            with folder_lock(out):
                pass
    with folder_lock(out):  # released: free again, and no lock file is left behind
        pass
    assert not any(p.name.endswith(".lock") for p in tmp_path.iterdir())
    assert issubclass(FolderBusyError, UsageError)


def test_a_killed_holder_releases_the_lock(tmp_path):
    out = tmp_path / "report"
    code = textwrap.dedent(
        f"""
        import time
        from trapbudget.sensitivity.io import folder_lock
        with folder_lock({str(out)!r}):
            print("locked", flush=True)
            time.sleep(60)
        """
    )
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    try:
        assert child.stdout.readline().strip() == "locked"
        with pytest.raises(FolderBusyError), folder_lock(out):
            pass
        child.send_signal(signal.SIGKILL)
        child.wait(timeout=30)
        with folder_lock(out):  # the kernel dropped the dead holder's lock
            pass
    finally:
        if child.poll() is None:
            child.kill()


def test_replace_swaps_in_one_step_and_cleans_the_old_content(tmp_path):
    out = _folder(tmp_path / "report", "old")
    new = _folder(scratch_name(out, "part"), "new")
    replace_folder(new, out)
    assert (out / "study.json").read_text() == "new"
    assert not new.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report"]


def test_leftovers_of_killed_runs_are_removed(tmp_path):
    out = _folder(tmp_path / "report", "kept")
    _folder(out.with_name(".report.12345.part"), "half-written")
    _folder(out.with_name(".report.777.old"), "swapped out")
    _folder(tmp_path / ".other.1.part", "not ours")
    with folder_lock(out):
        removed = clean_leftovers(out)
    assert sorted(p.name for p in removed) == [".report.12345.part", ".report.777.old"]
    assert (out / "study.json").read_text() == "kept"
    assert (tmp_path / ".other.1.part").exists()


@pytest.mark.filterwarnings("ignore::trapbudget.sensitivity.ModelValidityWarning")
def test_kill_trials_leave_the_old_report_or_the_new_one(tmp_path):
    # SIGKILL and SIGINT at several moments of `trapbudget rank --out`; after each, the
    # folder is either the previous complete report or a new complete one.
    from importlib import resources

    scenario = tmp_path / "s.toml"
    scenario.write_bytes(
        (resources.files("trapbudget.examples") / "harrier-rb87.toml").read_bytes()
    )
    out = tmp_path / "report"
    argv = [sys.executable, "-m", "trapbudget.cli", "rank", str(scenario)]
    argv += ["--samples", "64", "--no-convergence", "--quiet", "--out", str(out)]
    assert subprocess.run(argv, capture_output=True, timeout=300).returncode == 0
    complete = {p.name for p in out.iterdir()}
    assert {"study.json", "report.html", "budget.nc"} <= complete
    for sig, delay in ((signal.SIGKILL, 0.5), (signal.SIGKILL, 2.0), (signal.SIGINT, 1.5)):
        before = (out / "study.json").read_bytes()
        child = subprocess.Popen(argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        time.sleep(delay)
        child.send_signal(sig)
        child.wait(timeout=300)
        assert out.is_dir()
        assert complete <= {p.name for p in out.iterdir()}
        json_now = (out / "study.json").read_bytes()
        assert json_now == before or b'"seed"' in json_now
    # the next run cleans what the killed ones left beside the folder
    assert subprocess.run(argv, capture_output=True, timeout=300).returncode == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report", "s.toml"]
    assert os.access(out / "report.html", os.R_OK)
