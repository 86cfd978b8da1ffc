"""fringecal screens: the displays this computer drives, and a pixel-exact check of the pattern window on one."""

from __future__ import annotations

import time

import numpy as np

from analysis.config import Config, load_config
from analysis.patterns import layout_of, split_screen
from rig.devices.screen import DisplayInfo, PygletScreen, choose_display, list_displays
from rig.errors import UsageError


def register(command) -> None:
    p = command("screens", cmd_screens, "list the displays; --check N shows a test pattern on one and verifies it",
                config="bench config (TOML): the display its panel opens on; --check uses its bit depth and packing")
    p.add_argument("--check", type=int, metavar="N",
                   help="open the pattern window on display N, read the framebuffer back, compare every pixel")
    p.add_argument("--allow-primary", action="store_true",
                   help="allow the desktop's primary display (a full-screen pattern there covers the desktop)")
    p.add_argument("--hold-s", type=float, default=3.0, metavar="S",
                   help="keep the test pattern up this long so you can look at the panel (default 3)")


def check_pattern(width_px: int, height_px: int, bit_depth: int, cfg: Config) -> np.ndarray:
    """Every gray level of the panel as a ramp (top half) above the config's split-screen grating (bottom half)."""
    levels = 2**bit_depth
    top = height_px // 2
    ramp = (np.arange(width_px * top) % levels).reshape(top, width_px)
    p = cfg.pattern
    split = split_screen(width_px, height_px - top, levels // 2, min(p.grating_low, levels - 1),
                         min(p.grating_high, levels - 1), layout_of(p), bit_depth)
    return np.vstack([ramp.astype(split.dtype), split])


def run_check(display: DisplayInfo, cfg: Config, hold_s: float) -> tuple[int, str]:
    """Show the check pattern on ``display`` with the config's bit depth and packing; return (wrong pixels, report)."""
    m = cfg.modulator
    screen = PygletScreen(display, m.bit_depth, m.rgb_shift_bits)
    try:
        pattern = check_pattern(screen.width_px, screen.height_px, m.bit_depth, cfg)
        shown = screen.show_checked(pattern)
        expected = screen.expected_rgb(pattern)
        if hold_s > 0:
            time.sleep(hold_s)
    finally:
        screen.close()
    wrong = np.any(shown != expected, axis=-1)
    count = int(np.count_nonzero(wrong))
    packing = "gray on R=G=B" if m.rgb_shift_bits == (0, 0, 0) else f"RGB shifts {list(m.rgb_shift_bits)}"
    head = f"{display.describe()}: {m.bit_depth}-bit check pattern ({packing})"
    if count == 0:
        return 0, f"{head}: all {wrong.size} pixels read back exactly"
    y, x = (int(v[0]) for v in np.nonzero(wrong))
    return count, (f"{head}: {count} of {wrong.size} pixels differ; first at x={x}, y={y}: expected "
                   f"{tuple(int(v) for v in expected[y, x])}, read {tuple(int(v) for v in shown[y, x])} "
                   "(scaling, dithering or a colour profile on this output?)")


def cmd_screens(args) -> int:
    """List the displays with position, size and the primary one; with --check N, verify the pattern window."""
    displays = list_displays()
    cfg = load_config(args.config) if args.config else None
    if args.check is None:
        for d in displays:
            print(d.describe())
        if cfg is not None:
            m = cfg.modulator
            try:
                chosen = choose_display(displays, m.display, m.width_px, m.height_px, m.allow_primary)
                print(f"{cfg.source}: the panel ({m.width_px}x{m.height_px}) would open on display {chosen.index}")
            except UsageError as err:
                print(f"{cfg.source}: {err}")
        return 0
    if args.hold_s < 0:
        raise UsageError(f"--hold-s: expected seconds >= 0, got {args.hold_s}")
    if not 0 <= args.check < len(displays):
        raise UsageError(f"--check: no display with index {args.check} "
                         f"(displays: {'; '.join(d.describe() for d in displays) or 'none'})")
    target = displays[args.check]
    if cfg is None:
        # no bench config: check an 8-bit panel of the display's own size
        from analysis.config import replace
        cfg = replace(Config(), **{"modulator.width_px": target.width_px, "modulator.height_px": target.height_px})
    m = cfg.modulator
    display = choose_display(displays, args.check, m.width_px, m.height_px, args.allow_primary or m.allow_primary)
    wrong, report = run_check(display, cfg, args.hold_s)
    print(report)
    return 0 if wrong == 0 else 1
