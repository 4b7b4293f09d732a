"""chainplan: signal budgets of sensor readout chains.

The API (``load``, ``loads``, ``budget``) is imported on first use, so the
command line (``chainplan.cli``) starts without the engine it may not need."""
from __future__ import annotations

from .errors import SpecError  # noqa: E402
from .version import __version__  # noqa: E402

__all__ = ["load", "loads", "budget", "SpecError", "__version__"]

#: public name -> name in chainplan.api
_API = {"load": "load", "loads": "loads", "budget": "budget_for"}


def __getattr__(name):
    if name in _API:
        from . import api
        return getattr(api, _API[name])
    raise AttributeError(f"module 'chainplan' has no attribute '{name}'")
