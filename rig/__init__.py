"""fringecal rig: hardware, orchestration and the command line."""

__version__ = "0.1.0"
