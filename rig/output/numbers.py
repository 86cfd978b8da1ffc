"""Numbers as the commands print them."""

from __future__ import annotations


def fixed(value: float, digits: int) -> str:
    """``value`` with ``digits`` decimals; a value that rounds to zero prints as 0, never as -0.0."""
    text = f"{value:.{digits}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text
