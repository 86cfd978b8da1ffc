"""The first day on a real bench as the README and --help tell it: the same steps in the same order, and the
README's worked example of applying a table doing what it says."""

import re
from pathlib import Path

import numpy as np
import pytest

from analysis.lut import build_lut
from rig.cli import FIRST_BENCH, build_parser
from rig.output.lut_files import metadata, write_lut_folder
from simulators.bench import Bench

README = Path(__file__).resolve().parents[1] / "README.md"


def section(title):
    text = README.read_text(encoding="utf-8")
    start = text.index(f"\n## {title}\n")
    end = text.find("\n## ", start + 1)
    return text[start:end if end > 0 else None]


def test_readme_second_section_is_the_first_bench_steps_in_the_help_order():
    titles = re.findall(r"^## (.+)$", README.read_text(encoding="utf-8"), flags=re.M)
    assert titles[1] == "First time on a real bench"
    steps = section("First time on a real bench")
    positions = [steps.find(f"`{command}") for command, _ in FIRST_BENCH]
    assert -1 not in positions, [c for (c, _), p in zip(FIRST_BENCH, positions) if p == -1]
    assert positions == sorted(positions)
    epilog = build_parser().epilog
    positions = [epilog.find(command) for command, _ in FIRST_BENCH]
    assert -1 not in positions and positions == sorted(positions)


def readme_example(folder):
    """The README's numpy block, reading the table in ``folder``."""
    code = re.search(r"```python\n(.*?)```", section("Using the table"), flags=re.S).group(1)
    code, n = re.subn(r'^folder = ".*?"', f"folder = {str(folder)!r}", code, flags=re.M)
    assert n == 1
    scope = {}
    exec(compile(code, "README.md", "exec"), scope)
    return scope


@pytest.mark.parametrize("reach", [1.0, 0.7])
def test_readme_example_gives_each_pixel_the_gray_of_its_wanted_phase(tmp_path, small_cfg, reach):
    """Through the true curve of the simulated panel, the grays the example picks give the wanted phase (mod 2 pi,
    up to one constant) within half a table step plus the table's own worst quantisation (judged on its smoothed
    curve, hence 10 % to spare). With reach 0.7 the
    panel spans less than 2 pi and the check covers the phases it can reach."""
    grays, phase = Bench(small_cfg).true_curve()
    phase = phase * reach
    lut = build_lut(grays, phase, bit_depth=8)
    write_lut_folder(tmp_path, lut, metadata(lut, "truth", "2026-01-01T00:00:00+00:00", 1064.0))
    got = readme_example(tmp_path)
    wanted = np.mod(got["wanted"], 2 * np.pi)
    achieved = phase[got["gray"]] - phase[lut.gray[0]]
    error = np.angle(np.exp(1j * (achieved - wanted)))
    step = lut.range_rad / lut.levels
    inside = wanted < lut.range_rad - step if reach < 1 else np.ones(wanted.shape, bool)
    assert inside.mean() > 0.5
    bound = step / 2 + lut.worst_quantisation_rad
    assert np.abs(error[inside]).max() <= bound * 1.1  # 10 %: the table follows the smoothed curve, not the truth
    # not a bound that anything meets: the errors fill it, they do not sit far inside it
    assert np.abs(error[inside]).max() > 0.3 * bound

@pytest.mark.parametrize("cell_gap_um", [3.2, 1.6], ids=["reaches-2pi", "reaches-less"])
def test_a_finished_sweep_says_what_the_table_spans_and_what_to_do_next(tmp_path, capsys, cell_gap_um):
    """The table line gives lut.json's own range (less than 2π on a thin panel); the next: lines name a table file
    that loads and a verify command the parser accepts with files that exist; times are UTC."""
    import json
    import shlex

    from conftest import small_config_file
    from rig.cli import main

    cfg = small_config_file(tmp_path, **{"sweep.levels": list(range(0, 256, 15)) + [255],
                                         "simulator.response.cell_gap_um": cell_gap_um})
    run = tmp_path / "run"
    assert main(["sweep", "--sim", "--config", str(cfg), "--out", str(run), "--pair", "0:80", "--no-frames"]) == 0
    out = capsys.readouterr().out
    table = json.loads((run / "lut" / "lut.json").read_text())
    assert f"lookup table: {table['levels']} entries over {table['range_rad']:.3f} rad" in out
    assert (table["range_rad"] < 2 * np.pi) == (cell_gap_um < 3)
    assert table["created_utc"].endswith("+00:00")
    assert "-0.0 " not in out and "-0.0)" not in out
    load, verify = [line.removeprefix("next: ") for line in out.splitlines() if line.startswith("next: ")]
    path = Path(load.split()[1])
    # a table short of 2 pi carries its range in the name of every bare file (rig/output/lut_files.py)
    npy = "lut.npy" if table["range_rad"] >= 2 * np.pi - 1e-9 else f"lut-range-{table['range_label']}.npy"
    assert path == run / "lut" / npy and np.array_equal(np.load(path), table["gray"])
    words = shlex.split(verify.removeprefix("check it on the bench: "))
    assert words[0] == "fringecal"
    args = build_parser().parse_args(words[1:])
    assert args.command == "verify" and args.sim and Path(args.lut).is_dir() and Path(args.config).is_file()


@pytest.mark.parametrize("value, std, text", [
    (0.067412, 0.000036, "0.067412 +- 0.000036"),   # two significant digits of the std (GUM 7.2.6, from memory)
    (0.067412, 0.0042, "0.0674 +- 0.0042"),
    (58.47, 3.2, "58.5 +- 3.2"),
    (-0.00004, 0.013, "0.000 +- 0.013"),            # no -0.000
    (1.5, 0.0, "1.5 +- 0"),                         # a zero std shows as 0, not as a rounded-away value
])
def test_a_value_is_printed_to_the_digits_its_std_allows(value, std, text):
    from rig.output.numbers import with_std
    assert with_std(value, std) == text
