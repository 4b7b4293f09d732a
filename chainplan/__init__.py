"""chainplan: signal budgets of sensor readout chains."""
from __future__ import annotations

from .version import __version__  # noqa: E402

from .api import budget_for as budget  # noqa: E402
from .api import load, loads  # noqa: E402
from .errors import SpecError  # noqa: E402

__all__ = ["load", "loads", "budget", "SpecError", "__version__"]
