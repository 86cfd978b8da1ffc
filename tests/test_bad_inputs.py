"""Bad inputs thrown at every command, as a new user would: each ends with the expected exit code (2 bad input,
3 device or storage fault), a single line on stderr naming the culprit, no traceback, and every file that existed
before unchanged (nothing measured is lost).

Every case runs `fringecal` in a subprocess on the small simulated bench with five levels, next to one finished
sweep shared by all cases (which no case may change).
"""

from __future__ import annotations

import hashlib
import json
import resource
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from conftest import small_config_file

LEVELS = [0, 64, 128, 192, 255]


MEMORY_LIMIT = 4 << 30  # bytes of address space per command: a runaway allocation fails instead of swamping CI


def limit_memory():
    resource.setrlimit(resource.RLIMIT_AS, (MEMORY_LIMIT, MEMORY_LIMIT))


def fringecal(*args, cwd) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "rig.cli", *map(str, args)], capture_output=True, text=True,
                          cwd=cwd, timeout=300, preexec_fn=limit_memory)


@pytest.fixture(scope="module")
def ws(tmp_path_factory) -> Path:
    """The shared workspace: bench.toml (small bench, five levels) and done/, a finished sweep."""
    root = tmp_path_factory.mktemp("bad-inputs")
    small_config_file(root, **{"sweep.levels": LEVELS, "sweep.reference_every": 2})
    out = fringecal("sweep", "--sim", "--config", "bench.toml", "--pair", "0:80", "--out", "done", cwd=root)
    assert out.returncode == 0, out.stderr
    return root


def snapshot(*folders: Path) -> dict[Path, str]:
    """Every file's hash, but the writer lock's (it records which process last held the run)."""
    return {p: hashlib.sha256(p.read_bytes()).hexdigest()
            for folder in folders for p in folder.rglob("*") if p.is_file() and p.name != "writer.lock"}


# --- what the cases set up: each returns a path inside the case's folder -------------------------------------
def config_text(ws: Path, old: str, new: str, name: str):
    def make(case: Path) -> Path:
        text = (ws / "bench.toml").read_text()
        assert old in text, old
        (case / name).write_text(text.replace(old, new))
        return case / name
    return make


def raw_file(name: str, data: bytes):
    def make(case: Path) -> Path:
        (case / name).write_bytes(data)
        return case / name
    return make


def folder(case: Path) -> Path:
    (case / "cfgdir").mkdir()
    return case / "cfgdir"


def under_a_file(case: Path) -> Path:
    (case / "afile").write_text("x")
    return case / "afile" / "bench.toml"


def copy_run(ws: Path, case: Path, change=None) -> Path:
    run = case / "run"
    shutil.copytree(ws / "done", run)
    if change is not None:
        change(run)
    return run


def edit_info(run: Path, **fields) -> None:
    info = json.loads((run / "run.json").read_text())
    for key, value in fields.items():
        if value is None:
            info.pop(key, None)
        else:
            info[key] = value
    (run / "run.json").write_text(json.dumps(info))


def corrupt_middle_line(run: Path) -> None:
    lines = (run / "journal.jsonl").read_text().splitlines(keepends=True)
    lines[2] = '{"frame": 3, "gray": \n'
    (run / "journal.jsonl").write_text("".join(lines))


def interrupted(run: Path) -> None:
    """A run stopped in its sweep: no manifest and no results yet."""
    for name in ("manifest.csv", "phase.csv", "analysis.json"):
        (run / name).unlink()
    edit_info(run, status="interrupted")


def before_sweep(run: Path) -> None:
    interrupted(run)
    edit_info(run, sweep_began=False, pair=None)


def frames_folder(case: Path, images: dict[str, np.ndarray], manifest: str | bytes | None = None) -> Path:
    src = case / "imgs"
    src.mkdir()
    for name, img in images.items():
        np.save(src / name, img)
    if manifest is not None:
        (src / "manifest.csv").write_bytes(manifest.encode() if isinstance(manifest, str) else manifest)
    return src


def fringe(gray: int, dtype=np.uint16) -> np.ndarray:
    """A 64x64 frame of vertical fringes of 8 px whose phase follows the gray (a usable split-screen crop)."""
    x = np.arange(64)
    phase = -gray / 255 * 2 * np.pi
    row = 2000 + 1500 * np.cos(2 * np.pi * x / 8 + phase)
    return np.tile(row, (64, 1)).astype(dtype)


def npy_folder(bad_gray: int | None = None, bad=None):
    """Five fringe frames g000..g255.npy; the one at ``bad_gray`` replaced by ``bad``."""
    def make(case: Path) -> Path:
        imgs = {f"g{g:03d}.npy": fringe(g) for g in LEVELS}
        if bad_gray is not None:
            imgs[f"g{bad_gray:03d}.npy"] = bad
        return frames_folder(case, imgs)
    return make


def nan_frame():
    img = fringe(64).astype(float)
    img[10, 10] = np.nan
    return img


def manifest_folder(text: str | bytes):
    def make(case: Path) -> Path:
        return frames_folder(case, {f"g{g:03d}.npy": fringe(g) for g in LEVELS}, text)
    return make


def corrupt_png(case: Path) -> Path:
    src = npy_folder()(case)
    import cv2
    ok, buf = cv2.imencode(".png", fringe(128))
    assert ok
    (src / "g128.npy").unlink()
    (src / "g128.png").write_bytes(buf.tobytes()[:200])
    return src


def phase_csv(transform):
    """The finished run's phase.csv with its rows changed by ``transform(gray, phase, std) -> (phase, std)``."""
    def make(case: Path, ws: Path) -> Path:
        lines = (ws / "done" / "phase.csv").read_text().splitlines()
        out = [lines[0]]
        for line in lines[1:]:
            g, p, s, c, n = line.split(",")
            p, s = transform(int(g), float(p), float(s))
            out.append(f"{g},{p!r},{s!r},{c},{n}")
        (case / "phase.csv").write_text("\n".join(out) + "\n")
        return case / "phase.csv"
    return make


def glitch(g, p, s):
    """Gray 128's phase 6 rad up: the step into or out of it then goes back against the curve's direction by more than
    1 rad whichever way the curve runs (its steps between these grays are under 5 rad)."""
    return (p + 6.0 if g == 128 else p), s


# --- the cases ---------------------------------------------------------------------------------------------
# (id, argv builder (ws, case) -> list, exit code, culprit fragment of the one stderr line)
CASES = []


def case(name, code, culprit):
    def add(build):
        CASES.append(pytest.param(build, code, culprit, id=name))
        return build
    return add


CONFIG_COMMANDS = {
    "run": lambda ws, c, cfg: ["run", "--sim", "--config", cfg, "--out", c / "r"],
    "sim-truth": lambda ws, c, cfg: ["sim-truth", "--config", cfg, "--out", c / "t.csv"],
    "lut": lambda ws, c, cfg: ["lut", ws / "done" / "phase.csv", "--config", cfg, "--out", c / "table"],
    "plan": lambda ws, c, cfg: ["plan", "--config", cfg],
    "flicker": lambda ws, c, cfg: ["flicker", "--sim", "--config", cfg, "--gray", 5, "--out", c / "r"],
}
CONFIG_FILES = {
    "binary": (raw_file("binary.toml", bytes(range(256)) * 4), "binary.toml"),
    "non-utf8": (raw_file("latin.toml", "# réglage du banc\n[laser]\nwavelength_nm = 1064.0\n".encode("latin-1")),
                 "latin.toml"),
    "a-folder": (folder, "cfgdir"),
    "unreadable": (lambda c: Path("/proc/self/mem"), "/proc/self/mem"),
    "under-a-file": (under_a_file, "afile/bench.toml"),
}
for _cmd, _argv in CONFIG_COMMANDS.items():
    for _kind, (_make, _culprit) in CONFIG_FILES.items():
        case(f"config-{_kind}-{_cmd}", 2, _culprit)(
            lambda ws, c, argv=_argv, make=_make: argv(ws, c, make(c)))

CONFIG_VALUES = {
    "repeated-levels": ("levels = [0, 64, 128, 192, 255]", "levels = [5, 5, 5]", 2, "sweep.levels"),
    "nan-wavelength": ("wavelength_nm = 1064.0", "wavelength_nm = nan", 2, "laser.wavelength_nm"),
    "infinite-power": ("power_mw = 0.25", "power_mw = inf", 2, "laser.power_mw"),
    "camera-off-the-beam": ("camera_offset_mm = [-0.42, 0.0]", "camera_offset_mm = [30.0, 30.0]", 2,
                            "geometry.camera_offset_mm"),
    "largest-camera": ("width_px = 256\nheight_px = 200", "width_px = 16384\nheight_px = 16384", 2,
                       "camera.width_px"),
    "saturating-light": ("power_mw = 0.25", "power_mw = 90000.0", 3, "attenuate"),
    "toml-cut-short": ("[sweep]", "[sweep", 2, "bad.toml"),
    "frames-per-level-word": ("frames_per_level = 2", 'frames_per_level = "many"', 2, "sweep.frames_per_level"),
}
for _name, (_old, _new, _code, _culprit) in CONFIG_VALUES.items():
    case(f"config-{_name}", _code, _culprit)(
        lambda ws, c, old=_old, new=_new: ["run", "--sim", "--config", config_text(ws, old, new, "bad.toml")(c),
                                           "--out", c / "r"])

# --- resuming -----------------------------------------------------------------------------------------------
RESUMES = {
    "a-file": (lambda ws, c: raw_file("notarun", b"x")(c), 2, "notarun"),
    "json-array": (lambda ws, c: copy_run(ws, c, lambda r: (r / "run.json").write_text("[1, 2]")), 2, "run.json"),
    "non-utf8-run-json": (lambda ws, c: copy_run(ws, c, lambda r: (r / "run.json").write_bytes(b'{"a": "\xe9"}')),
                          2, "run.json"),
    "no-config-in-run-json": (lambda ws, c: copy_run(ws, c, lambda r: (interrupted(r), edit_info(r, config=None))),
                              2, "run.json"),
    "journal-deleted": (lambda ws, c: copy_run(ws, c, lambda r: (interrupted(r), (r / "journal.jsonl").unlink())),
                        2, "journal.jsonl"),
    "corrupt-middle-line": (lambda ws, c: copy_run(ws, c, lambda r: (interrupted(r), corrupt_middle_line(r))),
                            2, "line 3"),
    "stopped-before-the-sweep": (lambda ws, c: copy_run(ws, c, before_sweep), 2, "start"),
    "already-complete": (lambda ws, c: copy_run(ws, c), 2, "already complete"),
    "nowhere": (lambda ws, c: c / "nowhere", 2, "nowhere"),
}
for _name, (_make, _code, _culprit) in RESUMES.items():
    case(f"sweep-resume-{_name}", _code, _culprit)(lambda ws, c, make=_make: ["sweep", "--resume", make(ws, c)])
case("sweep-resume-with-config", 2, "--resume")(
    lambda ws, c: ["sweep", "--resume", copy_run(ws, c, interrupted), "--config", ws / "bench.toml"])
case("map-resume-a-sweep", 2, "not a map run")(lambda ws, c: ["map", "--resume", copy_run(ws, c, interrupted)])
case("map-resume-a-file", 2, "notarun")(lambda ws, c: ["map", "--resume", raw_file("notarun", b"x")(c)])
case("map-resume-json-array", 2, "run.json")(
    lambda ws, c: ["map", "--resume", copy_run(ws, c, lambda r: (r / "run.json").write_text("[]"))])

# --- output and event paths ---------------------------------------------------------------------------------
SIM = ["--sim", "--config", "bench.toml"]
PATHS = {
    "run-out-a-file": (lambda ws, c: ["run", *SIM, "--out", raw_file("f", b"x")(c)], "--out"),
    "run-out-proc": (lambda ws, c: ["run", *SIM, "--out", "/proc/x"], "--out"),
    "run-events-proc": (lambda ws, c: ["run", *SIM, "--out", c / "r", "--events", "/proc/x/e.jsonl"], "--events"),
    "run-events-a-folder": (lambda ws, c: ["run", *SIM, "--out", c / "r", "--events", c], "--events"),
    # a folder that exists but takes no new file (even for root): the check writes a scratch file, not the events file
    "run-events-unwritable-folder": (lambda ws, c: ["run", *SIM, "--out", c / "r", "--events", "/proc/e.jsonl"],
                                     "--events"),
    "sweep-out-a-file": (lambda ws, c: ["sweep", *SIM, "--out", raw_file("f", b"x")(c)], "--out"),
    "tune-events-proc": (lambda ws, c: ["tune", *SIM, "--out", c / "r", "--events", "/proc/x/e"], "--events"),
    "flicker-events-proc": (lambda ws, c: ["flicker", *SIM, "--gray", 5, "--out", c / "r", "--events", "/proc/x/e"],
                            "--events"),
    "lut-out-a-file": (lambda ws, c: ["lut", ws / "done" / "phase.csv", "--out", raw_file("f", b"x")(c)], "--out"),
    "lut-out-proc": (lambda ws, c: ["lut", ws / "done" / "phase.csv", "--out", "/proc/x"], "--out"),
    "sim-truth-out-a-folder": (lambda ws, c: ["sim-truth", "--config", "bench.toml", "--out", c], "--out"),
    "sim-truth-out-proc": (lambda ws, c: ["sim-truth", "--config", "bench.toml", "--out", "/proc/x/t.csv"], "--out"),
    "analyze-out-proc": (lambda ws, c: ["analyze", ws / "done", "--out", "/proc/x"], "--out"),
    "predict-out-a-file": (lambda ws, c: ["predict", "--from", ws / "done", f"{ws / 'done'}@780",
                                          "--wavelength-nm", 905, "--out", raw_file("f", b"x")(c)], "--out"),
    "preview-out-proc": (lambda ws, c: ["preview", *SIM, "--out", "/proc/x/f.png"], "--out"),
}
for _name, (_build, _culprit) in PATHS.items():
    case(_name, 2, _culprit)(_build)

# --- analyze --------------------------------------------------------------------------------------------------
ANALYZE = {
    "dark-nan": (lambda ws, c: [ws / "done", "--dark-adu", "nan"], "--dark-adu"),
    "dark-inf": (lambda ws, c: [ws / "done", "--dark-adu", "inf"], "--dark-adu"),
    "dark-1e9": (lambda ws, c: [ws / "done", "--dark-adu", "1e9"], "--dark-adu"),
    "dark-negative": (lambda ws, c: [ws / "done", "--dark-adu", "-5"], "--dark-adu"),
    "dark-not-a-number": (lambda ws, c: [ws / "done", "--dark-adu", "abc"], "--dark-adu"),
    "npy-with-nan": (lambda ws, c: [npy_folder(64, nan_frame())(c)], "g064.npy"),
    "npy-with-inf": (lambda ws, c: [npy_folder(64, np.full((64, 64), np.inf))(c)], "g064.npy"),
    "npy-3d": (lambda ws, c: [npy_folder(64, np.zeros((64, 64, 3)))(c)], "g064.npy"),
    "image-4x4": (lambda ws, c: [npy_folder(0, np.ones((4, 4), np.uint16))(c)], "g000.npy"),
    "corrupt-png": (lambda ws, c: [corrupt_png(c)], "g128.png"),
    "manifest-gray-minus-1": (lambda ws, c: [manifest_folder("gray,file\n-1,g000.npy\n64,g064.npy\n")(c)],
                              "manifest.csv line 2"),
    "manifest-gray-text": (lambda ws, c: [manifest_folder("gray,file\n0,g000.npy\nabc,g064.npy\n")(c)],
                           "manifest.csv line 3"),
    "manifest-missing-file": (lambda ws, c: [manifest_folder("gray,file\n0,g000.npy\n64,gone.npy\n")(c)],
                              "gone.npy"),
    "manifest-non-utf8": (lambda ws, c: [manifest_folder(b"gray,file\n0,g000.npy\n64,\xe9.npy\n")(c)],
                          "manifest.csv"),
    "manifest-bom-bad-gray": (lambda ws, c: [manifest_folder("\ufeffgray,file\n0,g000.npy\n999,g064.npy\n")(c)],
                              "manifest.csv line 3"),
    "interrupted-run": (lambda ws, c: [copy_run(ws, c, interrupted)], "resume"),
    "source-a-file": (lambda ws, c: [ws / "done" / "phase.csv"], "phase.csv"),
    "roi-outside": (lambda ws, c: [ws / "done", "--roi", "0:5000,0:10"], "--roi"),
    "reference-gray-absent": (lambda ws, c: [ws / "done", "--reference-gray", 7], "--reference-gray"),
    "bit-depth-0": (lambda ws, c: [ws / "done", "--bit-depth", 0], "--bit-depth"),
    "bad-name-pattern": (lambda ws, c: [npy_folder()(c), "--name-pattern", "("], "--name-pattern"),
}
for _name, (_build, _culprit) in ANALYZE.items():
    case(f"analyze-{_name}", 2, _culprit)(lambda ws, c, build=_build: ["analyze", *build(ws, c), "--out", c / "a"])
case("analyze-out-an-existing-run", 2, "--out")(lambda ws, c: ["analyze", ws / "done", "--out", copy_run(ws, c)])


def other_results(ws, c):
    out = c / "a"
    assert fringecal("analyze", npy_folder()(c), "--out", out, cwd=c).returncode == 0
    return ["analyze", ws / "done", "--out", out]


case("analyze-out-results-of-another-source", 2, "--out")(other_results)
case("analyze-manifest-with-bom", 0, None)(
    lambda ws, c: ["analyze", manifest_folder("\ufeffgray,file\n" + "".join(f"{g},g{g:03d}.npy\n" for g in LEVELS))(c),
                   "--out", c / "a"])

# --- lut --------------------------------------------------------------------------------------------------------
LUT = {
    "phase-glitch-6rad": (lambda ws, c: [phase_csv(glitch)(c, ws)], "gray 128"),
    "phases-1e300": (lambda ws, c: [phase_csv(lambda g, p, s: (p * 1e300, s))(c, ws)], "phase_rad"),
    "std-1e300": (lambda ws, c: [phase_csv(lambda g, p, s: (p, 1e300))(c, ws)], "phase_std_rad"),
    "wavelength-1e308": (lambda ws, c: [ws / "done" / "phase.csv", "--wavelength-nm", "1e308"], "--wavelength-nm"),
    "wavelength-nan": (lambda ws, c: [ws / "done" / "phase.csv", "--wavelength-nm", "nan"], "--wavelength-nm"),
    "range-nan": (lambda ws, c: [ws / "done" / "phase.csv", "--range", "nan"], "--range"),
    "levels-1": (lambda ws, c: [ws / "done" / "phase.csv", "--levels", 1], "--levels"),
    "binary-phase-csv": (lambda ws, c: [raw_file("phase.csv", bytes(range(256)))(c)], "phase.csv"),
    "phase-csv-a-folder": (lambda ws, c: [c], "PHASE_CSV"),
}
for _name, (_build, _culprit) in LUT.items():
    case(f"lut-{_name}", 2, _culprit)(lambda ws, c, build=_build: ["lut", *build(ws, c), "--out", c / "table"])
case("lut-out-an-existing-run", 2, "--out")(lambda ws, c: ["lut", ws / "done" / "phase.csv", "--out", copy_run(ws, c)])


def other_table(ws, c):
    curve = phase_csv(lambda g, p, s: (1.01 * p, s))(c, ws)
    assert fringecal("lut", curve, "--out", c / "table", cwd=c).returncode == 0
    return ["lut", ws / "done" / "phase.csv", "--out", c / "table"]


case("lut-out-table-of-another-curve", 2, "--out")(other_table)

# --- predict, compare, report, verify, pattern, plan --------------------------------------------------------------
def predict(*extra):
    return lambda ws, c: ["predict", "--from", ws / "done", f"{ws / 'done'}@780", "--out", c / "p", *extra]


for _name, _value in {"1e308": "1e308", "nan": "nan", "negative": "-5", "zero": "0"}.items():
    case(f"predict-wavelength-{_name}", 2, "--wavelength-nm")(predict("--wavelength-nm", _value))
case("predict-from-missing", 2, "nowhere")(
    lambda ws, c: ["predict", "--from", c / "nowhere", ws / "done", "--wavelength-nm", 905, "--out", c / "p"])
case("predict-out-an-existing-run", 2, "--out")(
    lambda ws, c: ["predict", "--from", ws / "done", f"{ws / 'done'}@780", "--wavelength-nm", 905,
                   "--out", copy_run(ws, c)])
case("compare-run-missing", 2, "nowhere")(lambda ws, c: ["compare", ws / "done", c / "nowhere"])
case("compare-wavelength-nan", 2, "@nan")(lambda ws, c: ["compare", ws / "done", f"{ws / 'done'}@nan"])
REPORTS = {
    "corrupt-analysis-json": (lambda r: (r / "analysis.json").write_text('{"range_rad": '), "analysis.json"),
    "corrupt-phase-csv": (lambda r: (r / "phase.csv").write_bytes(bytes(range(256))), "phase.csv"),
    "run-json-array": (lambda r: (r / "run.json").write_text("[]"), "run.json"),
    "corrupt-run-json": (lambda r: (r / "run.json").write_text("{"), "run.json"),
}
for _name, (_change, _culprit) in REPORTS.items():
    case(f"report-{_name}", 2, _culprit)(lambda ws, c, change=_change: ["report", copy_run(ws, c, change)])
case("report-nowhere", 2, "nowhere")(lambda ws, c: ["report", c / "nowhere"])
case("report-a-file", 2, "phase.csv")(lambda ws, c: ["report", ws / "done" / "phase.csv"])
case("verify-lut-missing", 2, "--lut")(lambda ws, c: ["verify", *SIM, "--lut", c / "nowhere"])
case("verify-lut-json-corrupt", 2, "lut.json")(
    lambda ws, c: ["verify", *SIM, "--lut", copy_run(ws, c, lambda r: (r / "lut" / "lut.json").write_text("{"))
                   / "lut"])
case("pattern-lut-missing", 2, "--lut")(
    lambda ws, c: ["pattern", "--lut", c / "nowhere", "--kind", "blazed", "--out", c / "p.png"])
case("plan-wavelength-nan", 2, "--wavelength-nm")(lambda ws, c: ["plan", "--wavelength-nm", "nan"])
case("plan-wavelength-1e308", 2, "--wavelength-nm")(lambda ws, c: ["plan", "--wavelength-nm", "1e308"])

# --- run, sweep, flicker, map options ------------------------------------------------------------------------------
OPTIONS = {
    "run-warmup-minus-1": (["run", *SIM, "--warmup-minutes", -1], "--warmup-minutes"),
    "run-warmup-nan": (["run", *SIM, "--warmup-minutes", "nan"], "--warmup-minutes"),
    "sweep-warmup-a-year": (["sweep", *SIM, "--warmup-minutes", 525600], "--warmup-minutes"),
    "run-tolerance-nan": (["run", *SIM, "--adaptive", "--tolerance-mrad", "nan"], "--tolerance-mrad"),
    "run-max-levels-0": (["run", *SIM, "--adaptive", "--max-levels", 0], "--max-levels"),
    "run-from-nowhere": (["run", *SIM, "--from", "nowhere"], "nowhere"),
    "sweep-pair-dash": (["sweep", *SIM, "--pair", "0-80"], "--pair"),
    "flicker-expect-nan": (["flicker", *SIM, "--gray", 5, "--expect-hz", "nan"], "--expect-hz"),
    "flicker-expect-negative": (["flicker", *SIM, "--gray", 5, "--expect-hz", -1], "--expect-hz"),
    "flicker-seconds-nan": (["flicker", *SIM, "--gray", 5, "--seconds", "nan"], "--seconds"),
    "flicker-seconds-1e9": (["flicker", *SIM, "--gray", 5, "--seconds", "1e9"], "--seconds"),
    "flicker-gray-999": (["flicker", *SIM, "--gray", 999], "--gray"),
    "map-grid-0x3": (["map", *SIM, "--grid", "0x3"], "--grid"),
    "map-background-999": (["map", *SIM, "--grid", "2x2", "--background-gray", 999], "--background-gray"),
    "unknown-command": (["calibrate"], "calibrate"),
    "unknown-option": (["run", "--sim", "--fast"], "--fast"),
}
for _name, (_argv, _culprit) in OPTIONS.items():
    case(_name, 2, _culprit)(lambda ws, c, argv=_argv: [*argv, "--out", c / "r"] if argv[0] in
                             ("run", "sweep", "flicker", "map") else argv)


@pytest.mark.parametrize("build, code, culprit", CASES)
def test_bad_input(ws, tmp_path, build, code, culprit):
    shutil.copy(ws / "bench.toml", tmp_path / "bench.toml")
    argv = build(ws, tmp_path)
    before = snapshot(ws, tmp_path)
    out = fringecal(*argv, cwd=tmp_path)
    assert "Traceback" not in out.stderr + out.stdout, out.stderr
    assert out.returncode == code, out.stderr
    lines = [line for line in out.stderr.splitlines() if line.strip()]
    if culprit is not None:
        assert len(lines) == 1, out.stderr
        assert culprit in lines[0], lines[0]
    after = snapshot(ws, tmp_path)
    changed = [str(p) for p, digest in before.items() if after.get(p) != digest]
    assert not changed, f"changed or removed: {changed}"


def test_there_are_enough_cases():
    assert len(CASES) >= 60


def test_force_writes_over_results_of_another_source(ws, tmp_path):
    """analyze, lut and predict refuse an --out holding a run or results from elsewhere; --force writes there."""
    run = copy_run(ws, tmp_path)
    curve = phase_csv(lambda g, p, s: (1.01 * p, s))(tmp_path, ws)
    commands = [["analyze", ws / "done", "--out", run],
                ["predict", "--from", ws / "done", f"{ws / 'done'}@780", "--wavelength-nm", 905, "--out", run],
                ["lut", curve, "--out", run / "lut"]]
    for argv in commands:
        assert fringecal(*argv, cwd=tmp_path).returncode == 2
        done = fringecal(*argv, "--force", cwd=tmp_path)
        assert done.returncode == 0, done.stderr
    table = json.loads((run / "lut" / "lut.json").read_text())
    assert table["source_file"] == str(curve)
    assert json.loads((run / "prediction.json").read_text())["wavelength_nm"] == 905
