"""Shipped configurations: demo benches and a commented template for a real one."""

from pathlib import Path

HERE = Path(__file__).parent
DEFAULT_SIM = HERE / "tweezers-1064.toml"
