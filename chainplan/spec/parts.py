"""Candidate buffers: parts files a chain spec includes, and inline candidates.

A parts file is a YAML mapping::

    description: followers we stock          # optional
    include: [more_parts.yaml]               # optional, relative to this file
    candidates:
      - name: nmos_50u                       # unique among all candidates
        kind: source_follower                # any follower-type stage kind
        kp: 120 µA/V²                        # ...its fields, exactly as in a chain
        i_bias: 50 µA
        input_bias:                          # optional: its own input bias network
          c: 100 nF                          # coupling capacitor from the node it reads
          r_bias: 100M                       # bias resistor from the input to...
          bias: vdd                          # ...this voltage or rail of the including chain
        rating:                              # optional: where it may go (placement: rules, spec.rules)
          temperature: [-40 °C, 85 °C]
          supply: [1.8 V, 5.5 V]
        cost:                                # optional
          price: 0.35                        # a plain number in your currency
          count: 2                           # parts it adds to the board (default 1)
          power: 2 mW                        # overrides the computed supply power

A chain spec names parts files under ``include:`` (a path or a list of paths,
relative to the spec) and may list more candidates inline under
``candidates:`` in the same form.  Each candidate's stage is built by the same
validator as a chain's stages (:func:`chainplan.spec.loader.build_stage`), with the
including chain's rails, so errors read the same and name the parts file.

A candidate with ``input_bias`` is inserted as two stages, an ``ac_coupling``
(series ``c``, ``r_bias`` to ``bias``) and right after it the follower: the
pair is one choice, costed as one, and lets a DC-coupled follower work at a
node whose DC level it could not follow (a piezo element at 0 V).  Rails that
a candidate names (``bias: vmid``, ``v_pos: vdd``, ``drain: vdd``...) are looked
up in the rails of the chain that includes the parts file; a rail that chain
does not declare is a spec error at the parts file's line, saying which chain
lacks it.

Safety of includes: a path must exist, must stay inside the project of the
file that includes it (its git work tree, or its folder outside git; symbolic
links are resolved first), and the include graph must have no cycle.
"""
from __future__ import annotations

import os
import stat
from dataclasses import dataclass, field

from ..errors import SpecError, nearest
from .model import Stage
from ..stages import REGISTRY
from .units import UnitError, parse_value
from .yamlsrc import LDict, LList, load_file, short

PARTS_KEYS = ("description", "include", "candidates")
COST_KEYS = {"price": "1", "count": "1", "power": "W"}
#: the fields of a candidate's input bias network: those of an ``ac_coupling`` stage
BIAS_KIND = "ac_coupling"
BIAS_KEYS = ("c", "r_bias", "bias")


@dataclass
class Candidate:
    """One candidate buffer: a follower-type stage (not yet connected) and its cost."""

    name: str
    stage: Stage                 # parent is None; connected by chainplan.spec.insert
    path: str                    # file that defines it
    line: int
    price: float | None = None
    count: int = 1
    power_w: float | None = None     # fixed power, overriding the operating point's
    tolerances: dict = field(default_factory=dict)
    input_bias: Stage | None = None  # an ac_coupling stage inserted right before the follower
    rating: dict = field(default_factory=dict)   # 'temperature': (lo, hi) K, 'supply': (lo, hi) V (spec.rules)

    @property
    def biased(self) -> bool:
        return self.input_bias is not None

    @property
    def kind(self) -> str:
        return self.stage.kind


def default_cost_basis(cands: list[Candidate]) -> str:
    """What buffers cost by default: 'price' when every candidate states one, else 'power'."""
    return "price" if cands and all(c.price is not None for c in cands) else "power"


def supply_power(cand: Candidate | None, op):
    """Supply power of a follower-type stage: a candidate's fixed ``power`` if it states one,
    else its operating point's ``power_w`` (a follower's Id·(drain − v_low), an op-amp's
    i_supply·(v_pos − v_neg)); per sample."""
    if cand is not None and cand.power_w is not None:
        return cand.power_w
    return op.values.get("power_w", 0.0)


def candidates_of(chain) -> list[Candidate]:
    """The chain's candidates (from ``include:`` and ``candidates:``), in the order given."""
    return chain.extra.get("candidates", [])


# -- SECTION_PARSERS entries ---------------------------------------------------

#: Bounds on includes (docs/spec.md, "Limits"): how deep includes nest, how many files one chain reads.
MAX_INCLUDE_DEPTH = 16
MAX_INCLUDE_FILES = 100


def parse_include(chain, node, line, path) -> None:
    """``include:`` of a chain spec: parts files whose candidates the chain may use."""
    root = project_root(path)
    for inc_path, inc_line in _include_items(node, line, path):
        _load_parts_file(chain, _resolve(inc_path, path, inc_line, root), (_real(path),), inc_line, path)


def parse_candidates(chain, node, line, path) -> None:
    """``candidates:`` of a chain spec: candidate buffers written inline."""
    _add_candidates(chain, node, line, path)


def load_parts(chain, parts_path: str) -> None:
    """Add the candidates of a parts file named outside any spec (the ``--parts`` option)."""
    if not os.path.isfile(parts_path):
        raise SpecError("no such parts file", parts_path)
    _load_parts_file(chain, _real(parts_path), (), None, None)


# -- includes --------------------------------------------------------------------

def project_root(path: str) -> str:
    """The project a spec belongs to: the top of its git work tree, or its folder."""
    folder = os.path.dirname(_real(path))
    cur = folder
    while True:
        if os.path.exists(os.path.join(cur, ".git")):
            return cur
        up = os.path.dirname(cur)
        if up == cur:
            return folder
        cur = up


def _real(path: str) -> str:
    return os.path.realpath(os.path.abspath(path))


def _include_items(node, line, path):
    if isinstance(node, str):
        return [(node, line)]
    if not isinstance(node, LList) or not all(isinstance(x, str) for x in node):
        raise SpecError("'include' is a parts file path or a list of them, e.g. include: [parts/followers.yaml]",
                        path, line, "include")
    return [(p, node.line_of(i)) for i, p in enumerate(node)]


def _resolve(inc: str, from_path: str, line: int, root: str) -> str:
    """The included file's real path, checked to exist, to be a regular file (a FIFO
    would block the read) and to stay inside ``root``."""
    at = (from_path, line, "include")
    if "\0" in inc:
        raise SpecError(f"'{short(inc)}' contains a NUL byte; a path cannot", *at)
    if not inc.strip():
        raise SpecError("an include path is empty", *at)
    target = _real(os.path.join(os.path.dirname(_real(from_path)), inc))
    if os.path.commonpath([target, root]) != root:
        raise SpecError(f"'{short(inc)}' lies outside the project ({root}); parts files must be inside it", *at)
    try:
        mode = os.stat(target).st_mode
    except OSError:
        raise SpecError(f"'{short(inc)}' does not exist (looked for {short(target, 200)})", *at) from None
    if stat.S_ISDIR(mode):
        raise SpecError(f"'{short(inc)}' is a folder; include names a parts file (YAML)", *at)
    if not stat.S_ISREG(mode):
        raise SpecError(f"'{short(inc)}' is not a regular file (a pipe, socket or device); "
                        "include names a parts file (YAML)", *at)
    return target


def _load_parts_file(chain, target: str, stack: tuple, inc_line, inc_from) -> None:
    """Read a parts file once per chain (a file reached along two include paths is
    read once; its candidates are not duplicates of themselves), within the depth
    and count limits, refusing cycles."""
    if target in stack:
        cycle = " → ".join(os.path.basename(p) for p in (*stack[stack.index(target):], target))
        raise SpecError(f"include cycle: {cycle}", inc_from, inc_line, "include")
    read = chain.extra.setdefault("parts_files", [])
    if target in read:
        return
    if len(stack) > MAX_INCLUDE_DEPTH:
        raise SpecError(f"includes nest more than {MAX_INCLUDE_DEPTH} files deep", inc_from, inc_line, "include")
    if len(read) >= MAX_INCLUDE_FILES:
        raise SpecError(f"the chain includes more than {MAX_INCLUDE_FILES} parts files", inc_from, inc_line,
                        "include")
    read.append(target)
    doc = load_file(target)
    if not isinstance(doc, LDict):
        raise SpecError("a parts file is a mapping with 'candidates:' (and optionally 'include:')", target,
                        getattr(doc, "line", 1))
    for key in doc:
        if key not in PARTS_KEYS:
            raise SpecError(f"unknown key '{key}'" + nearest(key, PARTS_KEYS), target, doc.line_of(key), key)
    if "include" in doc:
        root = project_root(target)
        for inc_path, line in _include_items(doc["include"], doc.line_of("include"), target):
            _load_parts_file(chain, _resolve(inc_path, target, line, root), (*stack, target), line, target)
    if "candidates" in doc:
        _add_candidates(chain, doc["candidates"], doc.line_of("candidates"), target)


# -- candidates ------------------------------------------------------------------

def _add_candidates(chain, node, line, path) -> None:
    if not isinstance(node, LList):
        raise SpecError("'candidates' is a list of follower stages, each with name:, kind: and its fields",
                        path, line, "candidates")
    have = chain.extra.setdefault("candidates", [])
    names = {c.name: c for c in have}
    for i, item in enumerate(node):
        if not isinstance(item, LDict):
            raise SpecError("each candidate is a mapping with name:, kind: and its fields", path,
                            node.line_of(i), f"candidates[{i}]")
        kind = item.get("kind")
        if isinstance(kind, str) and kind in REGISTRY and not REGISTRY[kind].follower_type:
            followers = sorted(k for k, m in REGISTRY.items() if m.follower_type)
            raise SpecError(f"'{kind}' is not a follower-type stage and cannot be a candidate buffer "
                            f"(follower types: {', '.join(followers)})", path, item.line_of("kind"), "kind")
        if "from" in item:
            raise SpecError("a candidate is not connected to anything; the advisor decides where it goes "
                            "(remove 'from:')", path, item.line_of("from"), "from")
        own = ("cost", "input_bias", "rating")
        body = LDict((k, v) for k, v in item.items() if k not in own)
        body.line, body.key_lines = item.line, {k: v for k, v in item.key_lines.items() if k not in own}
        tolerances: dict = {}
        st = _build(chain, path, body, tolerances, prefix=None)
        if st.name in names:
            other = names[st.name]
            raise SpecError(f"candidate name '{st.name}' is used twice (also {other.path}:{other.line})", path,
                            item.line_of("name"), "name")
        cand = Candidate(st.name, st, path, item.line, tolerances=tolerances)
        if "input_bias" in item:
            cand.input_bias = _input_bias(chain, cand, item["input_bias"], item.line_of("input_bias"), path)
        if "cost" in item:
            _cost(cand, item["cost"], item.line_of("cost"), path)
        if "rating" in item:
            from .rules import parse_rating
            cand.rating = parse_rating(item["rating"], item.line_of("rating"), path, f"{cand.name}.rating")
        names[st.name] = cand
        have.append(cand)


def _build(chain, path, body: LDict, tolerances: dict, prefix: str | None) -> Stage:
    """A stage from a candidate's mapping with the including chain's rails; field names in
    errors get ``prefix`` (``<candidate>.input_bias``), and a rail the chain lacks says so."""
    from .loader import NAME_RE, build_stage
    try:
        return build_stage(path, body, chain.rails, tolerances)
    except SpecError as exc:
        key = (exc.field or "").rpartition(".")[2]
        field_name = exc.field if prefix is None or exc.field is None else \
            f"{prefix}.{exc.field.partition('.')[2] or exc.field}"
        raw = body.get(key)
        if isinstance(raw, str) and NAME_RE.match(raw) and raw not in chain.rails and "rail" in exc.message:
            have = ", ".join(sorted(chain.rails)) or "none"
            msg = (f"'{raw}' is not a declared rail of chain '{chain.name}' ({chain.path}), which includes "
                   f"this parts file (its rails: {have}); declare '{raw}' under that chain's rails: or give "
                   "a voltage here")
            raise SpecError(msg, exc.file, exc.line, field_name) from None
        if field_name != exc.field:
            raise SpecError(exc.message, exc.file, exc.line, field_name) from None
        raise


def _input_bias(chain, cand: Candidate, node, line, path) -> Stage:
    """``input_bias: {c, r_bias, bias}``: the candidate's own AC coupling and bias resistor."""
    where = f"{cand.name}.input_bias"
    if not isinstance(node, LDict):
        raise SpecError("'input_bias' is a mapping: c (coupling capacitor), r_bias (bias resistor) and bias "
                        "(the voltage or rail it returns to), e.g. {c: 100 nF, r_bias: 100M, bias: vdd}",
                        path, line, where)
    for key in node:
        if key not in BIAS_KEYS:
            raise SpecError(f"an input bias has no field '{key}'" + nearest(key, BIAS_KEYS), path,
                            node.line_of(key), f"{where}.{key}")
    body = LDict(name="input_bias", kind=BIAS_KIND, **node)
    body.line, body.key_lines = node.line, dict(node.key_lines)
    st = _build(chain, path, body, cand.tolerances, prefix=where)
    st.name = f"{cand.name}_input_bias"
    return st


def _cost(cand: Candidate, node, line, path) -> None:
    where = f"{cand.name}.cost"
    if not isinstance(node, LDict):
        raise SpecError("'cost' is a mapping: price, count and/or power, e.g. 'price: 0.40'", path, line, where)
    for key in node:
        if key not in COST_KEYS:
            raise SpecError(f"unknown cost '{key}'" + nearest(key, COST_KEYS), path, node.line_of(key),
                            f"{where}.{key}")
    for key, unit in COST_KEYS.items():
        if key not in node:
            continue
        at = (path, node.line_of(key), f"{where}.{key}")
        try:
            value = parse_value(node[key], unit)
        except UnitError as exc:
            raise SpecError(str(exc), *at) from None
        if not (value >= 0 and value != float("inf")):
            raise SpecError(f"{key} must be zero or more and finite", *at)
        if key == "count":
            if value != int(value) or value < 1:
                raise SpecError("count is a whole number of parts, at least 1", *at)
            cand.count = int(value)
        elif key == "price":
            cand.price = value
        else:
            cand.power_w = value
