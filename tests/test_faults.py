"""Faults during a run on the simulated bench: a full disk, a second writer, SIGTERM and SIGHUP. Each stops cleanly
(exit code, one line of advice on stderr, run.json status) and the advice, followed, gives the same phase.csv as an
uninterrupted run."""

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import cv2
import pytest
from conftest import small_config_file

from rig.output.runs import read_journal

HERE = Path(__file__).resolve().parent
LEVELS = [0, 64, 128, 192, 255]


def fringecal(*args, disk_bytes: int | None = None) -> list[str]:
    """The command line; with ``disk_bytes``, on a disk that is full after that many bytes (tests/diskfull.py)."""
    head = ["-m", "rig.cli"] if disk_bytes is None else [str(HERE / "diskfull.py"), str(disk_bytes)]
    return [sys.executable, *head, *map(str, args)]


def run(*args, cwd, disk_bytes=None) -> subprocess.CompletedProcess:
    return subprocess.run(fringecal(*args, disk_bytes=disk_bytes), capture_output=True, text=True, cwd=cwd,
                          timeout=300)


def start(*args, cwd) -> subprocess.Popen:
    return subprocess.Popen(fringecal(*args), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, cwd=cwd)


def wait_for_stage(events: Path, proc, stage: str, timeout_s=120.0) -> None:
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout_s:
        if events.exists() and f'"name":"{stage}"' in events.read_text():
            return
        if proc.poll() is not None:
            raise AssertionError(f"the command ended before its {stage} stage: {proc.stderr.read()}")
        time.sleep(0.02)
    raise AssertionError(f"no {stage} stage")


def error_lines(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines() if line.strip()]


def status(folder: Path) -> str:
    return json.loads((folder / "run.json").read_text())["status"]


@pytest.fixture(scope="module")
def bench(tmp_path_factory):
    """The small bench with five levels, and an uninterrupted sweep and run on it."""
    root = tmp_path_factory.mktemp("faults")
    small_config_file(root, **{"sweep.levels": LEVELS, "sweep.reference_every": 2})
    for command in ("sweep", "run"):
        extra = ["--pair", "0:80"] if command == "sweep" else []
        out = run(command, "--sim", "--config", "bench.toml", *extra, "--out", f"whole-{command}", cwd=root)
        assert out.returncode == 0, out.stderr
    return root


def test_a_full_disk_stops_the_run_resumably_and_records_only_what_was_written(bench, tmp_path):
    whole = bench / "whole-sweep"
    written = (whole / "journal.jsonl").stat().st_size + sum(p.stat().st_size for p in (whole / "frames").iterdir())
    cut = tmp_path / "cut"
    out = run("sweep", "--sim", "--config", bench / "bench.toml", "--pair", "0:80", "--out", cut, cwd=tmp_path,
              disk_bytes=written // 2)
    assert out.returncode == 3, out.stderr
    lines = error_lines(out.stderr)
    assert len(lines) == 1 and "No space left on device" in lines[0], out.stderr
    assert f"fringecal sweep --resume {cut}" in lines[0] and "Traceback" not in out.stderr
    assert status(cut) == "interrupted"
    # nothing recorded that was not written: every journal line whole, every frame it names on disk and readable
    contents = read_journal(cut / "journal.jsonl")
    assert contents.truncated is None
    named = [r["file"] for r in contents.records if r.get("file")]
    assert named and all(cv2.imread(str(cut / name), cv2.IMREAD_UNCHANGED) is not None for name in named)
    assert 0 < len(contents.checkpoints()) < len(read_journal(whole / "journal.jsonl").checkpoints())

    resumed = run("sweep", "--resume", cut, cwd=tmp_path)
    assert resumed.returncode == 0, resumed.stderr
    assert (cut / "phase.csv").read_text() == (whole / "phase.csv").read_text()
    manifest = (cut / "manifest.csv").read_text().splitlines()[1:]
    assert all((cut / row.split(",")[1]).is_file() for row in manifest)


def test_a_second_writer_is_refused_and_the_first_goes_on(tmp_path):
    folder, events = tmp_path / "run", tmp_path / "events"
    # every gray level in real time (about 18 s): long enough to try twice while it runs, however fast the machine
    config = small_config_file(tmp_path, **{"simulator.timing.realtime": True, "sweep.settle_s": 0.05})
    first = start("sweep", "--sim", "--config", config, "--pair", "0:80", "--out", folder, "--events", events,
                  cwd=tmp_path)
    wait_for_stage(events, first, "sweep")
    second = run("sweep", "--resume", folder, cwd=tmp_path)
    third = run("map", "--resume", folder, cwd=tmp_path)
    assert first.poll() is None, "the first writer ended before the second tried"
    first.send_signal(signal.SIGINT)
    _, err = first.communicate(timeout=300)
    assert first.returncode == 130, err
    for refused in (second, third):
        assert refused.returncode == 2, refused.stderr
        lines = error_lines(refused.stderr)
        assert len(lines) == 1 and f"being written by process {first.pid}" in lines[0], refused.stderr
    checkpoints = [r["checkpoint"] for r in read_journal(folder / "journal.jsonl").records if "checkpoint" in r]
    assert checkpoints and len(checkpoints) == len(set(checkpoints))
    assert status(folder) == "interrupted"


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGHUP], ids=["SIGTERM", "SIGHUP"])
@pytest.mark.parametrize("stage", ["tune", "sweep"])
def test_a_stop_signal_ends_the_run_with_advice_that_works(bench, tmp_path, sig, stage):
    """Stopped while tuning, a run cannot be resumed and the advice is to start again; stopped in its sweep, the
    advice is to resume. Either way, following it gives the uninterrupted run's phase.csv."""
    folder, events = tmp_path / "run", tmp_path / "events"
    proc = start("run", "--sim", "--config", bench / "bench.toml", "--out", folder, "--events", events, cwd=tmp_path)
    wait_for_stage(events, proc, stage)
    proc.send_signal(sig)  # at once: the five-level sweep can end within a fraction of a second
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 130, err
    lines = error_lines(err)
    assert len(lines) == 1 and "Traceback" not in err, err
    assert status(folder) == "interrupted"
    if stage == "sweep":
        assert f"Resume with: fringecal sweep --resume {folder}" in lines[0]
        again = run("sweep", "--resume", folder, cwd=tmp_path)
        result = folder
    else:
        assert "start again: fringecal run" in lines[0]
        assert run("sweep", "--resume", folder, cwd=tmp_path).returncode == 2  # as the advice says
        command = lines[0].split("start again: ", 1)[1].split()[1:]
        result = tmp_path / "again"
        again = run(*command, "--out", result, cwd=tmp_path)
    assert again.returncode == 0, again.stderr
    assert (result / "phase.csv").read_text() == (bench / "whole-run" / "phase.csv").read_text()


def test_json_output_is_json_alone(bench, tmp_path):
    out = run("flicker", "--sim", "--config", bench / "bench.toml", "--gray", 64, "--seconds", 0.5, "--json",
              "--out", tmp_path / "f", cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    assert doc["gray"] == 64 and doc["frames"] >= 8


CRASH = """
import sys
import rig.commands.sweep as sweep


def finish(*args, **kwargs):
    raise RuntimeError("a bug in finishing")


sweep.finish = finish
from rig.cli import main
sys.exit(main(sys.argv[1:]))
"""


@pytest.mark.parametrize("debug", [False, True], ids=["plain", "debug"])
def test_an_internal_error_is_one_line_with_a_log_and_marks_the_run_failed(bench, tmp_path, debug):
    """A bug (here a finishing stage made to raise) ends with exit 1, one line saying where the traceback went, and
    the run marked failed; with --debug the traceback is shown as well."""
    folder = tmp_path / "run"
    argv = [sys.executable, "-c", CRASH, *(["--debug"] if debug else []), "sweep", "--sim", "--config",
            str(bench / "bench.toml"), "--pair", "0:80", "--out", str(folder)]
    out = subprocess.run(argv, capture_output=True, text=True, cwd=tmp_path, timeout=300)
    assert out.returncode == 1
    info = json.loads((folder / "run.json").read_text())
    assert info["status"] == "failed" and "a bug in finishing" in info["message"]
    assert "RuntimeError: a bug in finishing" in (folder / "error.log").read_text()
    lines = error_lines(out.stderr)
    assert lines[-1].endswith(f"details in {folder / 'error.log'}") and "a bug in finishing" in lines[-1]
    assert ("Traceback" in out.stderr) == debug
    if not debug:
        assert len(lines) == 1
    resumed = run("sweep", "--resume", folder, cwd=tmp_path)  # nothing measured was lost
    assert resumed.returncode == 0, resumed.stderr
    assert (folder / "phase.csv").read_text() == (bench / "whole-sweep" / "phase.csv").read_text()


class HeldLock:
    """Stands in for a listener's lock that the interrupted loop holds: acquiring it is recorded, never waited on."""

    def __init__(self):
        self.held, self.tried_while_held = True, 0

    def __enter__(self):
        self.tried_while_held += self.held
        return self

    def __exit__(self, *exc):
        return False


def test_a_stop_signal_takes_no_lock_the_interrupted_loop_may_hold(tmp_path, small_cfg):
    """A stop signal's handler runs in the main thread between two bytecodes of the loop, perhaps while the loop
    holds the progress state's lock (publishing a frame event). A handler that published its notice there waited on
    that lock for ever: a run once hung in its tune stage on SIGTERM. The handler only asks the engine to stop; the
    loop publishes the notice at its next step and stops there, resumably."""
    import argparse
    import os

    from rig.options import DEFAULT_METHOD
    from rig.run.engine import Interrupted
    from rig.run.folder import RunFolder
    from rig.run.session import Session
    from rig.run.steps import ShowSplit

    def one_pattern():
        yield ShowSplit(0, 0, 80)

    folder = RunFolder.create(tmp_path / "run", small_cfg, ["test"], {"camera_backend": "sim"}, save_frames=False)
    args = argparse.Namespace(sim=True, method=DEFAULT_METHOD, events=str(tmp_path / "events"), json=False)
    with Session(args, small_cfg, folder, "stop test") as s:
        s.state.lock = lock = HeldLock()
        os.kill(os.getpid(), signal.SIGTERM)  # handled at once, in this thread, "while the lock is held"
        assert lock.tried_while_held == 0
        lock.held = False
        with pytest.raises(Interrupted):
            s.engine.run(one_pattern())
    notices = [json.loads(line) for line in (tmp_path / "events").read_text().splitlines()]
    assert [e["message"] for e in notices if e["event"] == "log"] == [
        "SIGTERM: stopping after the current level (Ctrl-C again to stop at once)"]
