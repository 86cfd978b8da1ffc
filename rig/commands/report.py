"""``fringecal report``: a calibration's figures and a self-contained HTML page, written into its folder."""

from __future__ import annotations

from pathlib import Path

from rig.output.report import FIGURE_DIR, write_report


def cmd_report(args) -> int:
    """Write the calibration's figures and a self-contained HTML page (report.html) into the run folder."""
    path = write_report(args.run_dir)
    print(f"wrote {path} and the figures in {Path(args.run_dir) / FIGURE_DIR}/")
    return 0


def register(command) -> None:
    """Add ``fringecal report`` to the parser."""
    p = command("report", cmd_report, "figures and a self-contained HTML page of a calibration", config=None)
    p.add_argument("run_dir", metavar="RUN_DIR", help="run folder (or any folder holding a phase.csv)")
