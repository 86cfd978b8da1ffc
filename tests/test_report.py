"""The report of a simulated run: valid HTML with every figure embedded, the numbers of the run, the safety note."""

import base64
import json
import re
from html.parser import HTMLParser

import pytest

from conftest import small_config_file

from rig.cli import main
from rig.output.report import FIGURE_DIR, SAFETY_NOTE, write_report

# a small bench and a sweep of every 8th gray: a complete run folder in a few seconds
VOID = {"meta", "img", "br", "hr", "link", "input"}
EXPECTED = ("curve", "residuals", "table", "tuning", "frame", "drift")


class Checker(HTMLParser):
    """Collects unclosed or mismatched tags and the embedded images (html.parser, the standard library)."""

    def __init__(self):
        super().__init__()
        self.stack, self.errors, self.images, self.figures = [], [], [], []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "img":
            self.images.append(attrs.get("src", ""))
        if tag == "figure":
            self.figures.append(attrs.get("id"))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
        else:
            self.stack.pop()


@pytest.fixture(scope="module")
def run_folder(tmp_path_factory):
    root = tmp_path_factory.mktemp("report")
    quick = small_config_file(root, "quick.toml", **{"sweep.levels": list(range(0, 256, 8)) + [255],
                                                    "sweep.reference_every": 8})
    assert main(["run", "--sim", "--config", str(quick), "--out", str(root / "run")]) == 0
    return root / "run"


def test_report_is_valid_html_with_every_figure(run_folder):
    path = write_report(run_folder)
    text = path.read_text(encoding="utf-8")
    checker = Checker()
    checker.feed(text)
    checker.close()
    assert checker.errors == [] and checker.stack == []
    assert text.startswith("<!DOCTYPE html>")
    assert checker.figures == [f"fig-{name}" for name in EXPECTED]
    assert len(checker.images) == len(EXPECTED)
    for src in checker.images:  # self-contained: every figure is a PNG inside the page
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"
    for name in EXPECTED:
        assert (run_folder / FIGURE_DIR / f"{name}.png").is_file()
    assert not re.search(r"<(script|link)\b", text)  # nothing fetched from elsewhere


def test_report_states_the_runs_numbers_and_the_safety_note(run_folder):
    text = write_report(run_folder).read_text(encoding="utf-8")
    analysis = json.loads((run_folder / "analysis.json").read_text())
    table = json.loads((run_folder / "lut" / "lut.json").read_text())
    assert f"{analysis['range_rad']:.3f} rad" in text
    assert f"{1e3 * analysis['truth_rms_error_rad']:.2f} mrad RMS" in text
    assert f"grays {table['window_gray'][0]}..{table['window_gray'][1]}" in text
    assert "1064 nm" in text and "simulated bench" in text
    assert SAFETY_NOTE.replace("'", "&#x27;") in text
    assert "None recorded." in text  # a clean simulated run has no warnings


def test_report_of_a_bare_phase_csv_and_of_nothing(tmp_path, capsys):
    """A folder with only a phase.csv gets the curve and residual figures; an empty one a one-line error."""
    (tmp_path / "a").mkdir()
    rows = "".join(f"{g},{g * 0.025:.4f},0.01,0.8,2\n" for g in range(0, 256, 16))
    (tmp_path / "a" / "phase.csv").write_text("gray,phase_rad,phase_std_rad,contrast,n_frames\n" + rows)
    assert main(["report", str(tmp_path / "a")]) == 0
    checker = Checker()
    checker.feed((tmp_path / "a" / "report.html").read_text())
    assert checker.figures == ["fig-curve", "fig-residuals"] and checker.errors == []
    (tmp_path / "b").mkdir()
    assert main(["report", str(tmp_path / "b")]) == 2
    assert "RUN_DIR:" in capsys.readouterr().err
