"""What a change to a spec did: parameter changes and budget changes between two
specs, or one spec at two git revisions (read with ``git show``; the working
tree is never touched).

Budget figures compared: the same per-sample metrics a tolerance run reports
(gain, band edges, every interface's loading loss, every node's headroom,
power, noise/SNR/ENOB when the noise analysis exists, and any figure added to
``montecarlo.METRICS``) and every requirement's value and status.  Interfaces
are matched by their two ends (``element → lead`` and ``follower → lead`` are
different interfaces), nodes and figures by name.

The rules (docs/requirements.md, "compare"):

* **listed** — a figure is listed when it moved by more than ``LISTED``: a
  relative amount of its own size (0.1 %), never less than the floor of its
  unit below which a value has no meaning on a screen (1 nV, 1 pA, 1 pW; dB
  and bits: 0.005); there is no fixed µV tolerance, so a sub-µV noise figure
  that moves by 19 % is listed.
* **worse** — a figure with a better direction (less loading loss, more
  headroom, less noise, more SNR and ENOB, less power, a wider band) that moved
  the wrong way by more than ``SIGNIFICANT`` (1 % of its size; 0.05 dB; 0.05
  bits) is *worse* and a regression — ``--strict`` fails on it; a smaller move
  the wrong way is "slightly worse" and is not.  A node whose headroom goes
  negative "clips now"; a requirement that passed and fails now regresses.
  The gain alone has no direction (a design choice): it is "changed".
"""
from __future__ import annotations

import math
import os
import subprocess
from dataclasses import dataclass, field

from ..errors import UsageError
from ..spec.model import Chain

#: unit -> (absolute floor, relative part) of the move under which a figure counts as unchanged;
#: units without an entry use (the floor of meaning of spec.numbers.FLOOR or 0, LISTED_REL)
LISTED_REL = 1e-3
LISTED = {"dB": (0.005, 0.0), "bits": (0.005, 0.0)}
#: (absolute floor, relative part) of the move the wrong way that makes a figure worse
#: (a regression; ``--strict`` fails on it); smaller moves show as "slightly worse"
SIGNIFICANT_REL = 0.01
SIGNIFICANT = {"dB": (0.05, 0.0), "bits": (0.05, 0.0)}


def threshold(unit: str, x: float, y: float, kind: str = "listed") -> float:
    """The move a figure of ``unit`` between ``x`` and ``y`` must exceed to be listed
    (``kind='listed'``) or to be worse (``kind='worse'``): relative to its size, never
    below the floor of meaning of its unit."""
    from ..spec.numbers import FLOOR
    table, rel = (LISTED, LISTED_REL) if kind == "listed" else (SIGNIFICANT, SIGNIFICANT_REL)
    atol, rtol = table.get(unit, (FLOOR.get(unit, (0.0, ""))[0], rel))
    return atol + rtol * max(abs(x), abs(y))


@dataclass
class Side:
    label: str              # 'chains/x.yaml' or 'chains/x.yaml@HEAD'
    chain: Chain
    metrics: dict           # key -> float (nominal); interfaces keyed by both ends (see side_metrics)
    requirements: dict      # name -> result_dict


@dataclass
class ParamChange:
    where: str              # 'gain.r_f', 'rails.vdd', 'stages', 'requirements.min_gain', ...
    old: str | None         # text as written (None: absent)
    new: str | None


@dataclass
class Change:
    key: str
    label: str
    unit: str
    old: float | None
    new: float | None
    verdict: str            # 'better', 'worse', 'changed', 'added', 'removed'
    regression: bool = False


@dataclass
class ReqChange:
    name: str
    old: dict | None
    new: dict | None
    verdict: str            # 'fails now', 'passes now', 'still failing', 'margin up', 'margin down', 'added', 'removed'
    regression: bool = False


@dataclass
class Diff:
    old: Side
    new: Side
    params: list = field(default_factory=list)
    budget: list = field(default_factory=list)
    requirements: list = field(default_factory=list)
    unchanged: int = 0

    @property
    def regressions(self) -> int:
        return sum(c.regression for c in self.budget) + sum(c.regression for c in self.requirements)

    @property
    def empty(self) -> bool:
        return not (self.params or self.budget or self.requirements)


# -- reading ------------------------------------------------------------------

def _git(folder: str, *args) -> subprocess.CompletedProcess:
    try:
        return subprocess.run(["git", *args], cwd=folder, capture_output=True, check=False)
    except FileNotFoundError:
        raise UsageError("git is not installed; a revision cannot be read without it") from None


def read_revision(path: str, rev: str) -> str:
    """The text of ``path`` at git revision ``rev`` (``git show REV:path``)."""
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise UsageError(f"'{path}': no such folder, so no git repository to read revision '{rev}' from")
    top = _git(folder, "rev-parse", "--show-toplevel")
    if top.returncode != 0:
        raise UsageError(f"'{path}' is not in a git repository, so it has no revision '{rev}'")
    if rev.startswith("-") or _git(folder, "rev-parse", "--verify", "--quiet", f"{rev}^{{commit}}").returncode:
        raise UsageError(f"revision '{rev}' does not exist in the repository of '{path}'")
    root = os.path.realpath(top.stdout.decode().strip())
    rel = os.path.relpath(os.path.join(os.path.realpath(folder), os.path.basename(path)), root)
    shown = _git(folder, "show", f"{rev}:{rel.replace(os.sep, '/')}")
    if shown.returncode != 0:
        raise UsageError(f"'{rel}' does not exist at revision '{rev}'")
    try:
        return shown.stdout.decode("utf-8")
    except UnicodeDecodeError:
        raise UsageError(f"'{rel}' at revision '{rev}' is not UTF-8 text") from None


def load_side(path: str, rev: str | None = None, prepare=None) -> Side:
    """Load and analyse one side: a file as it is, or at a git revision.
    ``prepare(chain)`` may adjust the chain (command-line analysis options)."""
    from ..spec.loader import load_chain, load_chain_text
    if rev is None:
        chain, label = load_chain(path), path
    else:
        label = f"{path}@{rev}"
        chain = load_chain_text(read_revision(path, rev), label)
    if prepare is not None:
        chain = prepare(chain)
    return analyse_side(chain, label)


def analyse_side(chain: Chain, label: str) -> Side:
    from ..engine.budget import check_operating_points, evaluate
    from .montecarlo import metrics
    from .requirements import evaluate_requirements, result_dict
    ev = evaluate(chain)
    check_operating_points(chain, ev.dc)
    mets = side_metrics(chain, {k: float(v[0]) for k, v in metrics(ev).items()})
    reqs = {r.name: result_dict(r) for r in evaluate_requirements(ev)}
    return Side(label, chain, mets, reqs)


def side_metrics(chain: Chain, mets: dict) -> dict:
    """Metric keys as compared: a loading loss keyed by its two ends
    ('loading_loss_db.element>lead'), so a stage inserted before a reader makes a
    new interface instead of renaming the old one."""
    out = {}
    for k, v in mets.items():
        base, _, reader = k.partition(".")
        if base == "loading_loss_db" and reader and ">" not in reader:
            k = f"{base}.{chain.stage(reader).parent}>{reader}"
        out[k] = v
    return out


def figure_info(chain: Chain, key: str) -> tuple[str, str, int]:
    """(label, unit, better direction) of a compared key (see :func:`side_metrics`)."""
    from .montecarlo import METRICS, metric_info
    base, _, target = key.partition(".")
    if base == "loading_loss_db" and ">" in target:
        text, unit, better = METRICS[base]
        return f"{text} {target.replace('>', ' → ')}", unit, better
    return metric_info(chain, key)


# -- comparing ------------------------------------------------------------------

def _stage_fields(st) -> dict:
    """Parameter text as written (plus kind and connection) of one stage."""
    out = {k: str(v) for k, v in st.raw.items() if k != "__rails__"}
    out["kind"] = st.kind
    if st.parent is not None:
        out["from"] = st.parent
    return out


def _chain_fields(c: Chain, whole: set) -> dict:
    """Every parameter of a chain as 'where' -> text, for a parameter diff; the
    stages in ``whole`` (added or removed ones) as one line each."""
    out = {}
    for st in c.all_stages:
        fields = _stage_fields(st)
        if st.name in whole:
            out[st.name] = fields.pop("kind") + " (" + ", ".join(f"{k} {v}" for k, v in fields.items()) + ")"
            continue
        for k, v in fields.items():
            out[f"{st.name}.{k}"] = v
    for rail, v in c.rails.items():
        tol = c.extra.get("rail_tolerances", {}).get(rail)
        out[f"rails.{rail}"] = f"{v:g} V" + (f" {_tol_text(tol)}" if tol else "")
    out["temperature"] = f"{c.temp_k:g} K"
    a = c.analysis
    for k in ("f_ref_hz", "f_start_hz", "f_stop_hz", "points", "output", "noise_band_hz"):
        out[f"analysis.{k}"] = str(getattr(a, k))
    for r in c.extra.get("requirements", []):
        out[f"requirements.{r.name}"] = r.describe()
    corners = c.extra.get("corners")
    if corners is not None:
        for k, v in vars(corners).items():
            if v is not None:
                out[f"corners.{k}"] = str(v)
    return out


def _tol_text(tol) -> str:
    w = f"{tol.rel * 100:g} %" if tol.rel is not None else f"{tol.abs:g}"
    return f"±{w} {tol.dist}"


def param_changes(old: Chain, new: Chain) -> list[ParamChange]:
    names_a, names_b = ({st.name for st in c.all_stages} for c in (old, new))
    whole = names_a ^ names_b
    a, b = _chain_fields(old, whole), _chain_fields(new, whole)
    keys = list(a) + [k for k in b if k not in a]
    return [ParamChange(k, a.get(k), b.get(k)) for k in keys if a.get(k) != b.get(k)]


def _same(x, y, unit) -> bool:
    if x is None or y is None:
        return x is y
    if math.isnan(x) and math.isnan(y):
        return True
    if math.isinf(x) or math.isinf(y):
        return x == y
    return abs(x - y) <= threshold(unit, x, y, "listed")


def budget_changes(old: Side, new: Side) -> tuple[list[Change], int]:
    out, same = [], 0
    keys = list(old.metrics) + [k for k in new.metrics if k not in old.metrics]
    for key in keys:
        x, y = old.metrics.get(key), new.metrics.get(key)
        label, unit, better = figure_info(new.chain if y is not None else old.chain, key)
        if x is None or y is None:
            out.append(Change(key, label, unit, x, y, "added" if x is None else "removed"))
            continue
        if _same(x, y, unit):
            same += 1
            continue
        verdict, regression = "changed", False
        if better and not (math.isnan(x) or math.isnan(y)):
            worse = (y - x) * better < 0
            big = math.isinf(x) or math.isinf(y) or abs(y - x) > threshold(unit, x, y, "worse")
            verdict = ("worse" if big else "slightly worse") if worse else "better"
            regression = worse and big
        if key.startswith("headroom_v.") and x >= 0 > y:
            verdict, regression = "clips now", True
        out.append(Change(key, label, unit, x, y, verdict, regression))
    return out, same


def requirement_changes(old: Side, new: Side) -> tuple[list[ReqChange], int]:
    out, same = [], 0
    names = list(old.requirements) + [n for n in new.requirements if n not in old.requirements]
    for name in names:
        a, b = old.requirements.get(name), new.requirements.get(name)
        if a is None or b is None:
            out.append(ReqChange(name, a, b, "added" if a is None else "removed",
                                 regression=a is None and not b["passed"]))
            continue
        if a["passed"] and not b["passed"]:
            out.append(ReqChange(name, a, b, "fails now", True))
        elif b["passed"] and not a["passed"]:
            out.append(ReqChange(name, a, b, "passes now"))
        elif _same(a["margin"], b["margin"], a["unit"]) and a["limit"] == b["limit"]:
            same += 1
        else:
            up = not (b["margin"] < a["margin"])
            verdict = "still failing" if not b["passed"] else ("margin up" if up else "margin down")
            out.append(ReqChange(name, a, b, verdict))
    return out, same


def compare(old: Side, new: Side) -> Diff:
    budget, same_b = budget_changes(old, new)
    reqs, same_r = requirement_changes(old, new)
    return Diff(old, new, param_changes(old.chain, new.chain), budget, reqs, same_b + same_r)
