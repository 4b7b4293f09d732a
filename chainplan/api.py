"""The Python API: load a spec, analyse it, read the result objects.

    >>> import chainplan
    >>> chain = chainplan.load("chains/hydrophone_buoy.yaml")
    >>> b = chainplan.budget(chain)
    >>> b.gain_db, b.worst_interface.loss_db
"""
from __future__ import annotations

from .budget import Budget, analyse
from .model import Chain
from .spec import load_chain, load_chain_text

#: Feature hooks run on every nominal budget (noise, requirements): f(budget) -> None.
BUDGET_HOOKS: list = []


def load(path: str) -> Chain:
    """Read and validate a chain spec (raises chainplan.SpecError)."""
    return load_chain(path)


def loads(text: str, path: str = "<text>") -> Chain:
    return load_chain_text(text, path)


def budget_for(chain: Chain) -> Budget:
    """The nominal budget, with every feature's summary rows attached."""
    b = analyse(chain)
    for hook in BUDGET_HOOKS:
        hook(b)
    return b
