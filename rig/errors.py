"""The rig's exceptions. ``UsageError`` is bad input from the user: the CLI prints it on one line and exits 2."""


class FringecalError(Exception):
    """Base of every error fringecal raises on purpose."""


class UsageError(FringecalError):
    """An argument, file or setting given by the user cannot be used; the message names it and what was expected."""


class DeviceFault(FringecalError):
    """A device failed for good (gone, or failing every retry); the message names the device and what failed."""
