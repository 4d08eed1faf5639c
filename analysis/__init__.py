"""cloakrcs engine: calibrated RCS and cloak metrics from chamber sweeps.

The installed import package is ``cloakrcs`` (the repository keeps the engine in ``analysis/``
and the Dash app in ``dashboard/``, installed as ``cloakrcs`` and ``cloakrcs.dashboard``).
The common entry points are importable from the top level, loaded on first use so that
``import cloakrcs`` stays quick::

    from cloakrcs import load_campaign, process_campaign, ProcessSettings
    campaign = load_campaign("sample_measurements/manifest.toml")
    result = process_campaign(campaign, ProcessSettings(sector_deg=(-30, 30)))
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

# public name -> module that defines it (imported lazily, PEP 562)
_PUBLIC = {
    "load_campaign": "campaign",
    "Campaign": "campaign",
    "process_campaign": "process",
    "ProcessSettings": "process",
    "ProcessingResult": "process",
    "read_touchstone": "touchstone",
    "write_touchstone": "touchstone",
    "InputError": "errors",
    "simulate_campaign": "simulate",
}

__all__ = ["__version__", *_PUBLIC]


def __getattr__(name: str):
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'cloakrcs' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(__all__)
