"""Placement rules (chainplan.spec.rules): interfaces where nothing active may go and places whose
temperature or supply a candidate must be rated for.  They are read strictly (one error with file,
line and field), shown in the advice and the placement tables, keep a candidate from being picked by
the advisor, and keep the exact placement search from placing it — checked against brute force over
every allowed placement, each analysed in full."""
from __future__ import annotations

import itertools
import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from chainplan.cli import main
from chainplan.engine.budget import evaluate
from chainplan.errors import SpecError
from chainplan.placement.advisor import advise
from chainplan.placement.optimiser import Targets, optimise
from chainplan.spec.insert import insert_buffers
from chainplan.spec.loader import load_chain
from chainplan.spec.parts import candidates_of
from chainplan.spec.rules import excluded
from test_advisor import CHAIN as ADVICE_CHAIN

REPO = Path(__file__).resolve().parent.parent

#: the advisor tests' chain (a 100 kΩ probe on 10 m of cable into a converter), its rules appended
CHAIN = ADVICE_CHAIN.format(dc="vmid", r="100k", stages="""\
  - name: lead
    kind: cable
    length: 10 m
    c_per_m: 100 pF/m
""") + "{rules}"


def make(tmp_path, rules=""):
    (tmp_path / "parts").mkdir(exist_ok=True)
    shutil.copy(REPO / "chains" / "parts" / "followers.yaml", tmp_path / "parts" / "followers.yaml")
    f = tmp_path / "chain.yaml"
    f.write_text(CHAIN.format(rules=rules), encoding="utf-8")
    return f


def cands(chain, *names):
    by = {c.name: c for c in candidates_of(chain)}
    return [by[n] for n in names]


# -- reading ----------------------------------------------------------------------------------

@pytest.mark.parametrize("rules, line, field, words", [
    ("placement:\n  - interfaces: [leed]\n    nothing_active: potted\n", 1, "placement[0].interfaces",
     "'leed' is not a stage"),
    ("placement:\n  - interfaces: [lead]\n    temprature: [0 °C, 100 °C]\n", 2, "placement[0].temprature",
     "unknown key 'temprature'"),
    ("placement:\n  - interfaces: [lead]\n    temperature: [100 °C, 0 °C]\n", 2, "placement[0].temperature",
     "runs from a low to a higher value"),
    ("placement:\n  - interfaces: [lead]\n    supply: [3 A, 4 A]\n", 2, "placement[0].supply", "V"),
    ("placement:\n  - interfaces: [lead]\n", 1, "placement[0].interfaces", "nothing_active: REASON"),
    ("placement:\n  - nothing_active: potted\n", 1, "placement[0].interfaces", "names its interfaces"),
    ("placement: {lead: potted}\n", 0, "placement", "is a list of rules"),
])
def test_bad_rules_are_one_clear_error(tmp_path, capsys, rules, line, field, words):
    line += CHAIN.count("\n") + 1                 # lines after 'placement:', which follows the chain text
    f = make(tmp_path, rules)
    with pytest.raises(SpecError) as exc:
        load_chain(str(f))
    assert exc.value.line == line and exc.value.field == field and words in exc.value.message
    assert main(["buffers", str(f)]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_a_bad_rating_in_a_parts_file_names_its_line(tmp_path):
    f = make(tmp_path)
    parts = tmp_path / "parts" / "followers.yaml"
    text = parts.read_text(encoding="utf-8").replace("temperature: [-40 °C, 85 °C]", "temperature: [-40 °C, 85 V]", 1)
    parts.write_text(text, encoding="utf-8")
    with pytest.raises(SpecError) as exc:
        load_chain(str(f))
    assert exc.value.file.endswith("followers.yaml") and exc.value.field == "opamp_micro.rating.temperature"
    assert text.splitlines()[exc.value.line - 1].strip().startswith("temperature:")


# -- the checks -------------------------------------------------------------------------------

def test_a_part_goes_only_where_its_rating_covers_the_place(tmp_path):
    # common practice: a part is used within the range its datasheet rates it for; a place at 0 to
    # 100 °C takes the −40 to 125 °C parts, not the −40 to 85 °C op-amp, and not a part that states no rating
    f = make(tmp_path, "placement:\n  - interfaces: [adc]\n    where: hot box\n    temperature: [0 °C, 100 °C]\n"
                       "    supply: [3 V, 3.6 V]\n")
    chain = load_chain(str(f))
    micro, fast, nmos = cands(chain, "opamp_micro", "opamp_fast", "nmos_50u")
    assert excluded(chain, "adc", micro) == ("not rated for 0 °C to 100 °C (temperature at hot box): "
                                              "rated −40.0 °C to 85.0 °C")
    assert excluded(chain, "adc", fast) is None                 # −40 to 125 °C, 2.7 to 5.5 V
    assert "states no supply rating" in excluded(chain, "adc", nmos)
    assert excluded(chain, "lead", micro) is None               # the rule is about adc only
    nmos.rating = {}
    assert "states no temperature rating" in excluded(chain, "adc", nmos)


def test_advice_marks_ruled_out_candidates_and_never_picks_them(tmp_path, capsys, monkeypatch):
    f = make(tmp_path, "placement:\n  - interfaces: [lead]\n    nothing_active: potted\n"
                       "  - interfaces: [adc]\n    temperature: [0 °C, 100 °C]\n")
    chain = load_chain(str(f))
    a = advise(chain)
    rows = {i.reader: i for i in a.interfaces}
    lead, adc = rows["lead"], rows["adc"]
    assert lead.loss_now_db > 3 and lead.verdict == "ruled out" and lead.best is None
    assert all(e.rule == "nothing active here (potted)" and not e.usable for e in lead.candidates)
    micro = next(e for e in adc.candidates if e.candidate == "opamp_micro")
    assert micro.valid and micro.rule is not None and not micro.usable
    assert adc.best is not None and next(e for e in adc.candidates if e.candidate == adc.best).rule is None
    monkeypatch.setenv("COLUMNS", "80")
    monkeypatch.setenv("NO_COLOR", "1")
    assert main(["buffers", str(f)]) == 0
    out = capsys.readouterr().out
    assert "Placement rules" in out and "nothing active (potted)" in out
    assert "ruled out" in out and max(len(x) for x in out.splitlines()) <= 80
    assert main(["buffers", str(f), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["rules"][0]["interfaces"] == ["lead"] and d["rules"][0]["nothing_active"] == "potted"
    assert d["rules"][1]["temperature_k"] == pytest.approx([273.15, 373.15])
    assert "opamp_micro" in d["rules"][1]["keeps_out"] and "opamp_fast" in d["rules"][1]["allowed"]


def brute_force(chain, pool, gain_db, allowed):
    """The cheapest placement (price) meeting the gain over every allowed combination, each analysed in full."""
    readers = [st.name for st in chain.stages]
    best = None
    for combo in itertools.product(range(-1, len(pool)), repeat=len(readers)):
        placement = {r: pool[o] for r, o in zip(readers, combo) if o >= 0}
        if not all(allowed(r, c) for r, c in placement.items()):
            continue
        with np.errstate(all="ignore"):
            ev = evaluate(insert_buffers(chain, placement))
        if not bool(ev.valid[0]) or 20 * np.log10(abs(ev.gain()[0, 0])) < gain_db:
            continue
        cost = sum(c.price for c in placement.values())
        if best is None or cost < best[0] - 1e-12:
            best = (cost, placement)
    return best


def test_the_placement_search_honours_the_rules_exactly(tmp_path):
    # the free optimum is the cheapest part at the converter; the rules forbid anything there and
    # leave only the part rated −55 to 150 °C at the lead
    rules = ("placement:\n  - interfaces: [adc]\n    nothing_active: sealed converter module\n"
             "  - interfaces: [lead]\n    temperature: [-50 °C, 130 °C]\n")
    free = load_chain(str(make(tmp_path)))
    pool = cands(free, "nmos_50u", "opamp_micro", "npn_ef", "opamp_fast")
    ev = evaluate(free)
    target = float(20 * np.log10(abs(ev.gain()[0, 0]))) + 10.0       # needs a buffer
    t = Targets(min_gain_db={1e3: target})
    plain = optimise(free, t, candidates=pool, basis="price")
    ruled = load_chain(str(make(tmp_path, rules)))
    pool_r = cands(ruled, "nmos_50u", "opamp_micro", "npn_ef", "opamp_fast")
    plan = optimise(ruled, t, candidates=pool_r, basis="price")
    ref = brute_force(ruled, pool_r, target, lambda r, c: excluded(ruled, r, c) is None)
    assert plain.feasible and any(excluded(ruled, p.reader, next(c for c in pool_r if c.name == p.candidate))
                                  for p in plain.placements)       # the rules forbid the free optimum
    assert ref is not None and plan.feasible
    assert plan.cost == pytest.approx(ref[0], rel=1e-9)
    assert all(excluded(ruled, p.reader, next(c for c in pool_r if c.name == p.candidate)) is None
               for p in plan.placements)
    assert {p.reader: p.candidate for p in plan.placements} == {r: c.name for r, c in ref[1].items()}


def test_the_placement_table_shows_the_rules(tmp_path, capsys, monkeypatch):
    f = make(tmp_path, "placement:\n  - interfaces: [lead]\n    nothing_active: potted sensor head\n")
    monkeypatch.setenv("COLUMNS", "80")
    monkeypatch.setenv("NO_COLOR", "1")
    main(["buffers", str(f), "--min-gain", "-20 dB"])
    out = capsys.readouterr().out
    assert "Placement rules" in out and "probe → lead" in out and "potted sensor head" in out
