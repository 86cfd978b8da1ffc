"""``fringecal sim-truth``: the simulated panel's true phase curve, to check a calibration against."""

from __future__ import annotations

import csv

import numpy as np

from rig.options import load_bench_config, writable


def register(command) -> None:
    p = command("sim-truth", cmd_sim_truth, "write the simulated panel's true phase curve (gray,phase_rad)",
                config="the simulated bench's config (TOML); default: the 1064 nm demo bench")
    p.add_argument("--out", required=True, metavar="truth.csv", help="CSV file to write")


def cmd_sim_truth(args) -> int:
    """Write the simulated panel's true phase curve as gray,phase_rad."""
    from simulators.bench import Bench

    cfg = load_bench_config(args)
    out = writable(args.out, "--out")
    grays, phase = Bench(cfg).true_curve()
    with out.open("w", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(["gray", "phase_rad"])
        writer.writerows((int(g), f"{p:.6f}") for g, p in zip(grays, phase))
    reach = np.flatnonzero(phase >= 2 * np.pi)
    first = f"2pi first reached at gray {reach[0]}" if reach.size else "2pi not reached"
    print(f"wrote {out}: {len(grays)} levels, range {phase[-1]:.3f} rad ({phase[-1] / np.pi:.2f} pi), {first}")
    return 0
