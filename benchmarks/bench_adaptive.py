"""Adaptive against full sweep: measured levels, frames, bench time and table error for simulated panels of 8-12 bits.

Each panel is the small bench (256 x 200 camera) with every non-ideality of the demo bench turned on (cover-glass
ghosts included; warming as a saturating warm-up, see below), a cell gap for a range of 1.6 to 4 pi and its own
voltage curve.
`fringecal run --sim --adaptive` calibrates it (exposure, tuning, adaptive sweep at the tolerance TOLERANCE_MRAD);
`fringecal sweep --sim --full --pair` then measures every level at the same grating pair. Both sweeps visit the
second drift reference gray and correct the cyclic error from the frames' fringe amplitudes. Bench time
is the simulator's clock over the sweep (first to last sweep frame); table error is the RMS over the table's entries
of the curve's error against the simulator's truth at the entry's gray, piston removed (quantisation is the panel's,
not the measurement's, and is left out).

Warming: the demo bench's linear ramp (6 K/min) stands for the few seconds of its own sweep; held for the full sweeps
here (35 s of bench time at 8 bits, about 140 s at 10 and 550 s at 12) it would warm the panel by tens of kelvin, which
no panel does. The panels here warm as a panel does after it is switched on: WARMUP_K still to come at the bench's
start, approached with the time constant WARMUP_TAU_S and no ramp, so the adaptive sweep (early, a few seconds) sees
the fastest part of the warm-up and a long full sweep most of its rise.
"""

import contextlib
import io
import json
import tempfile
from pathlib import Path

from analysis.config import load_config, replace, to_toml
from configs import HERE
from rig.cli import main
from rig.run.adaptive import DEFAULT_TOLERANCE_MRAD

# a panel's warm-up after switch-on: a few kelvin with a time constant of a few minutes (from memory; the drive
# electronics and the backplane settle together)
WARMUP_K, WARMUP_TAU_S = 3.0, 240.0

NON_IDEAL = {  # the demo bench's non-idealities (configs/tweezers-1064.toml), its warming ramp replaced by the warm-up
    "simulator.response.crosstalk_px": 1.2, "simulator.response.thickness_variation": 0.03,
    "simulator.response.reflectance_droop": 0.03, "simulator.response.polarization_deg": 15.0,
    "simulator.noise.stray_light": 0.005, "simulator.noise.prnu": 0.005, "simulator.noise.dsnu_e": 2.0,
    "simulator.noise.dark_current_e_per_s": 20.0, "simulator.noise.hot_pixels": 60,
    "simulator.timing.vibration_urad": 0.5, "simulator.timing.drift_urad_per_s": 0.01,
    "simulator.timing.flicker_rad": 0.02, "simulator.timing.warmup_k": WARMUP_K,
    "simulator.timing.warmup_tau_s": WARMUP_TAU_S, "simulator.timing.warming_k_per_min": 0.0,
    "simulator.cover_glass.inner_reflectance": 0.005,
    "simulator.cover_glass.front_reflectance": 0.002, "simulator.cover_glass.front_wedge_urad": [60.0, 20.0],
    "simulator.cover_glass.inner_phase_rad": 1.0,
}

PANELS = [  # (label, bit depth, changes): ranges from about 1.6 to 4 pi, different voltage curves
    ("8-bit 2.2 pi, linear drive", 8, {}),
    ("8-bit 4 pi, linear drive", 8, {"simulator.response.cell_gap_um": 5.8}),
    ("8-bit 1.6 pi, late threshold", 8, {"simulator.response.cell_gap_um": 2.4, "simulator.response.threshold_v": 1.2,
                                         "simulator.response.electronic_gamma": 1.5}),
    ("10-bit 2.9 pi, gamma 2.2", 10, {"simulator.response.cell_gap_um": 4.2,
                                      "simulator.response.electronic_gamma": 2.2}),
    ("10-bit 2.2 pi, sharp tilt", 10, {"simulator.response.v0": 0.6}),
    ("12-bit 2.5 pi, gamma 1.8", 12, {"simulator.response.cell_gap_um": 3.6,
                                      "simulator.response.electronic_gamma": 1.8}),
    ("12-bit 4 pi, linear drive", 12, {"simulator.response.cell_gap_um": 5.8}),
]

TOLERANCE_MRAD = DEFAULT_TOLERANCE_MRAD  # the default (10 mrad) meets every target, "3 mrad above full" included
TARGETS = {8: (48, 1 / 4), 10: (72, 1 / 10), 12: (96, 1 / 20)}  # levels at most, bench time at most this share


def panel_config(folder: Path, label: str, bits: int, changes: dict) -> Path:
    cfg = replace(load_config(HERE / "small-bench.toml"), **NON_IDEAL, **changes,
                  **{"modulator.bit_depth": bits, "pattern.grating_high": 2 ** (bits - 1)})
    path = folder / f"{label.split(',')[0].replace(' ', '-')}.toml"
    path.write_text(to_toml(cfg))
    return path


def calibrate(args: list[str]) -> dict:
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        code = main(args)
    if code != 0:
        raise RuntimeError(f"fringecal {' '.join(args)} failed with exit code {code}")
    return json.loads((Path(args[args.index("--out") + 1]) / "analysis.json").read_text())


def run():
    print("small bench (256x200 camera) with the demo bench's non-idealities: "
          + ", ".join(f"{k.rsplit('.', 1)[1]} {v}" for k, v in NON_IDEAL.items()))
    print(f"{'panel':<30}{'range':>7} | {'adaptive: levels':>16}{'frames':>8}{'bench s':>9}{'table mrad':>11}"
          f"{'pred':>6} | {'full: levels':>12}{'frames':>8}{'bench s':>9}{'table mrad':>11} | {'time':>6}  verdict")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for label, bits, changes in PANELS:
            cfg_path = panel_config(folder, label, bits, changes)
            a = calibrate(["run", "--sim", "--adaptive", "--tolerance-mrad", str(TOLERANCE_MRAD), "--config",
                           str(cfg_path), "--out", str(folder / "a"), "--no-frames"])
            pair = json.loads((folder / "a" / "run.json").read_text())["pair"]
            f = calibrate(["sweep", "--sim", "--full", "--pair", f"{pair['low']}:{pair['high']}", "--config",
                           str(cfg_path), "--out", str(folder / "f"), "--no-frames"])
            for name in ("a", "f"):
                for path in sorted((folder / name).rglob("*"), reverse=True):
                    path.unlink() if path.is_file() else path.rmdir()
                (folder / name).rmdir()
            sa, sf = a["sweep"], f["sweep"]
            ea, ef = a["table_error_vs_truth_rad"] * 1e3, f["table_error_vs_truth_rad"] * 1e3
            max_levels, share = TARGETS[bits]
            ok = (sa["levels"] <= max_levels and sa["bench_s"] <= share * sf["bench_s"] and ea <= 10.0
                  and ea <= ef + 3.0)
            print(f"{label:<30}{a['range_pi']:>6.2f}π | {sa['levels']:>16}{sa['frames']:>8}{sa['bench_s']:>9.1f}"
                  f"{ea:>11.2f}{a['adaptive']['predicted_table_rms_rad'] * 1e3:>6.1f} | {sf['levels']:>12}"
                  f"{sf['frames']:>8}{sf['bench_s']:>9.1f}{ef:>11.2f} | {sa['bench_s'] / sf['bench_s']:>6.3f}  "
                  f"{'ok' if ok else 'MISSED'}")
    print("targets: 8 bits <= 48 levels and <= 1/4 of the full bench time; 10 bits <= 72 levels and <= 1/10; "
          "12 bits <= 96 levels and <= 1/20; table error <= 10 mrad and <= the full sweep's + 3 mrad. "
          f"'pred' is the adaptive sweep's own predicted table error (tolerance {TOLERANCE_MRAD:g} mrad).")
