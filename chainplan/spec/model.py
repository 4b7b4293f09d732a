"""The in-memory chain: what a spec describes, after parsing and validation.

A chain is a tree rooted at the source: every two-port stage reads one node
(the output of its ``parent``) and drives the node named after itself; loads
terminate a node.  Parameter values are SI floats (or per-sample arrays in a
tolerance run)."""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from ..stages import REGISTRY
from ..stages.base import StageKind


@dataclass
class Stage:
    name: str
    kind: str
    params: dict[str, Any]
    parent: str | None                 # node (driving stage's name) this stage reads; None for the source
    line: int | None = None            # line of the stage in its spec file
    field_lines: dict[str, int] = field(default_factory=dict)
    raw: dict[str, Any] = field(default_factory=dict)   # parameter text as written, for diffs and rewriting

    @property
    def model(self) -> StageKind:
        return REGISTRY[self.kind]

    @property
    def role(self) -> str:
        return self.model.role


@dataclass
class Analysis:
    f_ref_hz: float = 1e3
    f_start_hz: float = 1.0
    f_stop_hz: float = 1e8
    points: int = 401
    output: str | None = None          # a load stage or node; default: the first ADC
    noise_band_hz: tuple | None = None  # (low, high) the noise is integrated over; None: the span
    signal_band_hz: tuple | None = None  # (low, high) the signal occupies; None: the noise band, else f_ref alone
    mid_band_hz: float | None = None     # where the passband gain is read; None: the largest gain in the band

    @property
    def band_hz(self) -> tuple | None:
        """The signal band peaks and headroom are judged over: the declared signal
        band, else the noise band, else None (the reference frequency alone)."""
        return self.signal_band_hz if self.signal_band_hz is not None else self.noise_band_hz


@dataclass
class Chain:
    name: str
    description: str
    source: Stage
    stages: list[Stage]                # topological order (parents before children)
    rails: dict[str, float]
    temp_k: float = 300.0
    t_nom_k: float = 300.0             # temperature the parts' values are stated at (SPICE TNOM)
    temp_text: str | None = None       # 'temperature:' as written ('27 °C'), for the screens
    t_nom_text: str | None = None      # 't_nom:' as written
    analysis: Analysis = field(default_factory=Analysis)
    hazards: list[str] = field(default_factory=list)
    path: str | None = None
    extra: dict[str, Any] = field(default_factory=dict)   # requirements, candidates, tolerances, ...

    @property
    def gain_db_unit(self) -> str:
        """The unit of the chain's end-to-end gain in decibels: 'dBΩ' (20·log10 |V/A| re 1 Ω)
        when the source is a current (a transimpedance), else 'dB' (a voltage ratio)."""
        return "dBΩ" if self.source.model.signal_unit == "A" else "dB"

    @property
    def all_stages(self) -> list[Stage]:
        return [self.source, *self.stages]

    def stage(self, name: str) -> Stage:
        st = self._index()[0].get(name)
        if st is None or st.name != name:
            raise KeyError(name)
        return st

    def readers(self, node: str) -> list[Stage]:
        return list(self._index()[1].get(node, ()))

    def _index(self):
        """(name -> stage, node -> readers), built once per list of stages so long
        chains do not search it per lookup.  Rebuilt when ``stages`` is another list
        or its length changed; chains are not re-wired in place once built (the
        optimiser and spec/insert.py make a new Chain)."""
        key = (id(self.stages), len(self.stages), id(self.source))
        cache = self.__dict__.get("_lookup")
        if cache is None or cache[0] != key:
            by_name = {st.name: st for st in reversed(self.all_stages)}   # the first of a name wins
            readers: dict = {}
            for st in self.stages:
                readers.setdefault(st.parent, []).append(st)
            cache = self.__dict__["_lookup"] = (key, (by_name, readers))
        return cache[1]

    @property
    def nodes(self) -> list[str]:
        """Signal nodes in order: the source's, then every two-port's output."""
        return [self.source.name] + [st.name for st in self.stages if st.role == "two_port"]

    def output_node(self) -> str:
        """The node the end-to-end figures refer to."""
        out = self.analysis.output
        if out is None:
            adcs = [st for st in self.stages if st.kind == "adc"]
            out = adcs[0].name if adcs else self.stages[-1].name if self.stages else self.source.name
        st = next((s for s in self.all_stages if s.name == out), None)
        if st is not None and st.role == "load":
            return st.parent
        return out

    def path_to(self, node: str) -> list[Stage]:
        """Two-port stages from the source to ``node`` (inclusive), in order."""
        path, cur = [], node
        while cur != self.source.name:
            st = self.stage(cur)
            path.append(st)
            cur = st.parent
        return path[::-1]
