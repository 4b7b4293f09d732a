"""The Python API: load a spec, analyse it, read the result objects.

    >>> import chainplan
    >>> chain = chainplan.load("chains/hydrophone_buffered.yaml")
    >>> b = chainplan.budget(chain)
    >>> b.gain_db, b.worst_interface.loss_db
"""
from __future__ import annotations

import importlib

from .engine.budget import Budget, analyse
from .spec.model import Chain
from .spec.loader import load_chain, load_chain_text

#: Feature hooks run on every nominal budget (noise, requirements), as
#: "module:function" strings imported on use; each takes the Budget and adds
#: its summary rows (``b.extra_summary``) and JSON keys (``b.extra_json``).
BUDGET_HOOKS: list[str] = [
    "chainplan.engine.noise:attach_to_budget",
    "chainplan.engine.aliasing:attach_to_budget",
    "chainplan.engine.dcerror:attach_to_budget",
    "chainplan.engine.measurand:attach_to_budget",
    "chainplan.engine.commonmode:attach_to_budget",
    "chainplan.engine.loop:attach_to_budget",
    "chainplan.engine.slew:attach_to_budget",
    "chainplan.engine.sampling:attach_to_budget",
    "chainplan.engine.step:attach_to_budget",
    "chainplan.engine.startup:attach_to_budget",
    "chainplan.engine.power:attach_to_budget",
    "chainplan.engine.validity:attach_to_budget",
    "chainplan.studies.requirements:attach_to_budget",
]


def load(path: str) -> Chain:
    """Read and validate a chain spec (raises chainplan.SpecError)."""
    return load_chain(path)


def loads(text: str, path: str = "<text>") -> Chain:
    return load_chain_text(text, path)


def budget_for(chain: Chain) -> Budget:
    """The nominal budget, with every feature's summary rows attached."""
    b = analyse(chain)
    for target in BUDGET_HOOKS:
        mod, fn = target.split(":")
        getattr(importlib.import_module(mod), fn)(b)
    return b
