"""Runs that meet the machine: stop signals, a second run into the same folder, refused writes,
full disks and closed pipes. Each ends with one line (or quietly, for a closed pipe), never a
traceback, and leaves no half-written output.

The survey is plainly invented numbers (helpers.invented_table). Faults the
test machine cannot produce on demand (a full disk, a folder it may not write
to when the tests run as the superuser) are injected with the errno the
operating system gives.
"""

import errno
import os
import signal
import subprocess
import sys
import time

import pytest

import pathfinder.outputs.folder as folder_module
import pathfinder.outputs.write as write_module
from pathfinder.cli import main

from .helpers import csv_text, hidden_leftovers, invented_table, run_cli, snapshot, the_one_line

DATA = "survey.csv"
COVER = ["--response", "cover", "--exclude", "site"]
FAST = ["--mix", "1", "--folds", "3", "--no-nested", "--no-stability", "--no-subsets"]


def _write_survey(folder, rows=None):
    header, table = invented_table(n=rows) if rows else invented_table()
    path = folder / DATA
    path.write_bytes(csv_text(header, table).encode("utf-8"))
    return path


def _leftovers(folder):
    return hidden_leftovers(folder) + sorted(p.name for p in folder.glob(".*.lock"))


# ---------------------------------------------------------------------------
# Stop signals
# ---------------------------------------------------------------------------


def test_sigterm_while_writing_leaves_nothing(tmp_path, monkeypatch, capsys):
    data = _write_survey(tmp_path)
    real = write_module.write_csv
    written = []

    def write_then_stop(frame, path):
        if written:
            os.kill(os.getpid(), signal.SIGTERM)   # as `kill` or a batch system's time limit
        real(frame, path)
        written.append(path)

    monkeypatch.setattr(write_module, "write_csv", write_then_stop)
    code = main(["explore", str(data), *COVER, *FAST, "--out", str(tmp_path / "results"), "--quiet"])

    assert code == 128 + signal.SIGTERM
    assert not (tmp_path / "results").exists()
    assert _leftovers(tmp_path) == []
    line = the_one_line(capsys.readouterr().err)
    assert "SIGTERM" in line and "nothing was written" in line
    assert signal.getsignal(signal.SIGTERM) == signal.SIG_DFL   # handler given back


def test_sigterm_to_a_running_process_leaves_nothing(tmp_path):
    _write_survey(tmp_path, rows=400)
    process = subprocess.Popen(
        [sys.executable, "-m", "pathfinder.cli", "explore", DATA, *COVER, "--repeats", "20",
         "--out", "results", "--quiet"],
        cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    while not list(tmp_path.glob(".results.lock")) and time.monotonic() < deadline:
        time.sleep(0.05)                      # the run holds its folder: it is under way
    time.sleep(0.5)
    process.send_signal(signal.SIGTERM)
    _, err = process.communicate(timeout=120)

    assert process.returncode == 128 + signal.SIGTERM, err
    assert "Traceback" not in err and "SIGTERM" in the_one_line(err)
    assert not (tmp_path / "results").exists()
    assert _leftovers(tmp_path) == []


# ---------------------------------------------------------------------------
# Two runs into one folder
# ---------------------------------------------------------------------------


HOLD = """
import sys, time
from pathfinder.outputs.folder import output_lock
with output_lock(sys.argv[1]):
    print("held", flush=True)
    time.sleep(120)
"""


def test_a_second_run_into_a_busy_folder_is_refused(tmp_path):
    _write_survey(tmp_path)
    holder = subprocess.Popen([sys.executable, "-c", HOLD, "results"], cwd=tmp_path,
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        before = snapshot(tmp_path)
        second = run_cli(["explore", DATA, *COVER, *FAST, "--out", "results", "--overwrite"],
                         cwd=tmp_path)
        assert second.returncode == 2, second.stderr
        line = the_one_line(second.stderr)
        assert "another pathfinder run is writing to" in line and "results" in line
        assert snapshot(tmp_path) == before
    finally:
        holder.kill()
        holder.wait()
    # A holder that was killed leaves its lock file, but not its lock: the next run proceeds.
    third = run_cli(["explore", DATA, *COVER, *FAST, "--out", "results", "--quiet"], cwd=tmp_path)
    assert third.returncode == 0, third.stderr
    assert (tmp_path / "results" / "coefficients.csv").is_file()
    assert _leftovers(tmp_path) == []


def test_two_runs_started_together_do_not_both_write(tmp_path):
    _write_survey(tmp_path, rows=200)
    args = [sys.executable, "-m", "pathfinder.cli", "explore", DATA, *COVER, "--mix", "1",
            "--folds", "5", "--repeats", "5", "--no-nested", "--out", "results", "--overwrite",
            "--quiet"]
    first = subprocess.Popen(args, cwd=tmp_path, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    while not list(tmp_path.glob(".results.lock")) and time.monotonic() < deadline:
        time.sleep(0.02)
    second = subprocess.run(args, cwd=tmp_path, stderr=subprocess.PIPE, text=True, timeout=300)
    first_err = first.communicate(timeout=300)[1]

    assert first.returncode == 0, first_err
    assert second.returncode == 2 and "another pathfinder run" in the_one_line(second.stderr)
    assert _leftovers(tmp_path) == []


# ---------------------------------------------------------------------------
# Writes the machine refuses
# ---------------------------------------------------------------------------


def test_a_full_disk_while_writing_names_the_folder(tmp_path, monkeypatch, capsys):
    data = _write_survey(tmp_path)

    def full(frame, path):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))

    monkeypatch.setattr(write_module, "write_csv", full)
    code = main(["explore", str(data), *COVER, *FAST, "--out", str(tmp_path / "results"), "--quiet"])

    assert code == 2
    line = the_one_line(capsys.readouterr().err)
    assert str(tmp_path / "results") in line and os.strerror(errno.ENOSPC) in line
    assert "free some space" in line and "internal fault" not in line
    assert not (tmp_path / "results").exists() and _leftovers(tmp_path) == []


@pytest.mark.parametrize("number", [errno.EACCES, errno.EROFS])
def test_a_place_that_cannot_be_written_is_refused_before_the_run(tmp_path, monkeypatch, capsys,
                                                                  number):
    data = _write_survey(tmp_path)
    real_open = open

    def refuse_lock(path, *args, **kwargs):
        if str(path).endswith(".lock"):
            raise OSError(number, os.strerror(number), str(path))
        return real_open(path, *args, **kwargs)

    monkeypatch.setattr(folder_module, "open", refuse_lock, raising=False)
    monkeypatch.setattr("pathfinder.study.explore", lambda *a, **k: pytest.fail("the run started"))
    code = main(["explore", str(data), *COVER, *FAST, "--out", str(tmp_path / "results")])

    assert code == 2
    line = the_one_line(capsys.readouterr().err)
    assert str(tmp_path) in line and os.strerror(number) in line and "may write" in line


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0,
                    reason="needs a folder this user may not write to (the superuser may write anywhere)")
def test_a_read_only_folder_for_real(tmp_path):
    _write_survey(tmp_path)
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    try:
        result = run_cli(["explore", DATA, *COVER, *FAST, "--out", "locked/results"], cwd=tmp_path)
    finally:
        locked.chmod(0o755)
    assert result.returncode == 2
    assert "locked" in the_one_line(result.stderr) and "Traceback" not in result.stderr


# ---------------------------------------------------------------------------
# predict on a pipe
# ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def model_and_sites(tmp_path_factory):
    folder = tmp_path_factory.mktemp("predict")
    _write_survey(folder)
    done = run_cli(["explore", DATA, *COVER, *FAST, "--out", "results", "--quiet"], cwd=folder)
    assert done.returncode == 0, done.stderr
    header, rows = invented_table()
    (folder / "many.csv").write_text(csv_text(header, rows * 400), encoding="utf-8")  # 12,000 rows
    return folder


def test_predict_into_a_closed_pipe_ends_quietly(model_and_sites):
    process = subprocess.Popen(
        [sys.executable, "-m", "pathfinder.cli", "predict", "results/model.json", "many.csv"],
        cwd=model_and_sites, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    first_two = [process.stdout.readline(), process.stdout.readline()]   # as `| head -2`
    process.stdout.close()
    err = process.stderr.read().decode()
    process.wait(timeout=120)
    assert first_two[0].startswith(b"site,") and first_two[1].startswith(b"s1,")
    assert err == ""
    assert process.returncode == 128 + signal.SIGPIPE


@pytest.mark.skipif(not os.path.exists("/dev/full"), reason="needs /dev/full (a device that is always full)")
def test_predict_to_a_full_device_is_one_line(model_and_sites):
    with open("/dev/full", "w") as full:
        result = subprocess.run(
            [sys.executable, "-m", "pathfinder.cli", "predict", "results/model.json", "many.csv"],
            cwd=model_and_sites, stdout=full, stderr=subprocess.PIPE, text=True, timeout=120)
    assert result.returncode == 2
    line = the_one_line(result.stderr)
    assert "standard output" in line and os.strerror(errno.ENOSPC) in line
