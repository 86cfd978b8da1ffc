"""fringecal analysis: pure numerics on arrays and files (no hardware, no simulator)."""
