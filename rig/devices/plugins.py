"""A lab's own device class, named ``module:Class`` in a config's ``backend`` key, loaded and checked once here."""

from __future__ import annotations

import importlib

from rig.errors import UsageError


def load_plugin(settings, key: str, protocol, members: tuple[str, ...], what: str):
    """Instantiate the class named ``module:Class`` in ``settings.backend`` as Class(settings) and check that it
    satisfies ``protocol`` (rig.devices.protocols); ``key`` is the config key errors name, ``what`` the device kind
    ("camera", "screen") and ``members`` what the protocol asks for, listed when missing."""
    module_name, _, class_name = settings.backend.partition(":")
    try:
        module = importlib.import_module(module_name)
    except ImportError as err:
        raise UsageError(f"{key}: cannot import module {module_name!r} ({err})") from None
    cls = getattr(module, class_name, None)
    if cls is None:
        raise UsageError(f"{key}: module {module_name!r} has no class {class_name!r}")
    device = cls(settings)
    if not isinstance(device, protocol):
        missing = [n for n in members if not hasattr(device, n)]
        raise UsageError(f"{key}: {settings.backend} is not a {what} (missing {', '.join(missing)}; see "
                         f"rig.devices.protocols.{protocol.__name__})")
    return device
