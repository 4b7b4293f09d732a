"""Insert candidate buffers into a chain, returning a new chain.

An interface is named by the stage that reads it: interface ``Y`` is the
connection from Y's parent node X into Y.  A buffer inserted there becomes a
new stage (named ``buf_<Y>``, made unique) that reads X, and Y then reads the
buffer.  A candidate with its own input bias network brings a second stage,
an ``ac_coupling`` named ``buf_<Y>_bias``: it reads X and the buffer reads it.
Every other stage keeps its parent, so siblings at a fan-out node stay on X.
The input chain is never modified: stages are copied, and the engine
(:func:`chainplan.engine.budget.evaluate`) re-analyses the copy in full.
"""
from __future__ import annotations

import copy
import dataclasses

from ..errors import UsageError, nearest
from .model import Chain, Stage


def buffer_names(chain: Chain) -> dict:
    """The name a buffer gets at each interface, the same whichever interfaces are
    buffered (so partial analyses and the final chain agree)."""
    return _names(chain)[0]


def bias_names(chain: Chain) -> dict:
    """The name a buffer's input bias network gets at each interface (``buf_<reader>_bias``)."""
    return _names(chain)[1]


def _names(chain: Chain) -> tuple[dict, dict]:
    """``buf_<reader>`` and ``buf_<reader>_bias`` per interface, with ``_2``, ``_3``… appended
    where a stage already has the name; buffer names first, so they never depend on biases."""
    taken = {st.name for st in chain.all_stages}
    bufs, biases = {}, {}
    for st in chain.stages:
        bufs[st.name] = _unique(taken, f"buf_{st.name}")
        taken.add(bufs[st.name])
    for st in chain.stages:
        biases[st.name] = _unique(taken, f"{bufs[st.name]}_bias")
        taken.add(biases[st.name])
    return bufs, biases


def _unique(taken, base: str) -> str:
    name, k = base, 2
    while name in taken:
        name, k = f"{base}_{k}", k + 1
    return name


def interfaces(chain: Chain) -> list[str]:
    """Every interface, named by its reading stage, in chain order."""
    return [st.name for st in chain.stages]


def check_interface(chain: Chain, reader: str) -> None:
    names = interfaces(chain)
    if reader not in names:
        raise UsageError(f"'{reader}' is not an interface of chain '{chain.name}' (an interface is named by the "
                         "stage that reads it)" + nearest(reader, names))


def insert_buffers(chain: Chain, placement: dict) -> Chain:
    """A copy of ``chain`` with ``placement[reader]`` (a :class:`~chainplan.spec.parts.Candidate`)
    inserted in front of each named reader, named as :func:`buffer_names` says."""
    for reader in placement:
        check_interface(chain, reader)
    names, bias_at = _names(chain)
    inserted = dict(chain.extra.get("inserted", {}))
    stages: list[Stage] = []
    for st in chain.stages:
        st = _copy_stage(st)
        cand = placement.get(st.name)
        if cand is not None:
            feed = st.parent
            if cand.input_bias is not None:
                stages.append(_placed(cand.input_bias, bias_at[st.name], feed))
                feed = bias_at[st.name]
            buf = _placed(cand.stage, names[st.name], feed)
            st.parent = buf.name
            stages.append(buf)
            inserted[buf.name] = (st.name, cand)
        stages.append(st)
    #: buffer stage name -> (the reader it serves, its Candidate)
    extra = {**chain.extra, "inserted": inserted}
    return dataclasses.replace(chain, source=_copy_stage(chain.source), stages=stages,
                               analysis=dataclasses.replace(chain.analysis), extra=extra)


def _placed(st: Stage, name: str, parent: str) -> Stage:
    new = _copy_stage(st)
    new.name, new.parent = name, parent
    new.line, new.field_lines = None, {}
    return new


def _copy_stage(st: Stage) -> Stage:
    new = copy.copy(st)
    new.params = dict(st.params)
    new.field_lines = dict(st.field_lines)
    new.raw = copy.deepcopy(st.raw)
    return new
