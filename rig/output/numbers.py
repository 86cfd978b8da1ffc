"""Numbers as the commands print them."""

from __future__ import annotations

import math


def fixed(value: float, digits: int) -> str:
    """``value`` with ``digits`` decimals; a value that rounds to zero prints as 0, never as -0.0."""
    text = f"{value:.{digits}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text


def with_std(value: float, std: float, significant: int = 2) -> str:
    """``value +- std``, both rounded where the std's ``significant``-th digit falls (never a std printed as 0)."""
    if not (math.isfinite(std) and std > 0):
        return f"{value:.4g} +- {std:g}"
    digits = max(0, significant - 1 - math.floor(math.log10(std)))
    return f"{fixed(value, digits)} +- {std:.{digits}f}"
