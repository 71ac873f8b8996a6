"""Adapters: turn a verified route into machine-side files (plugins of `sidestep.adapters`)."""

from .base import Adapter, AdapterError, AdapterSettingsError
from .registry import AdapterEntry, adapter_entries, enabled_adapters, installed_adapters

__all__ = [
    "Adapter",
    "AdapterEntry",
    "AdapterError",
    "AdapterSettingsError",
    "adapter_entries",
    "enabled_adapters",
    "installed_adapters",
]
