"""Parts files and inline candidates: loading, rails, costs, and every kind of
bad input (one message with file, line and field; exit 2; no traceback)."""
from __future__ import annotations

import os
import textwrap

import pytest

from chainplan.cli import main
from chainplan.errors import SpecError
from chainplan.spec.parts import candidates_of, project_root
from chainplan.spec.loader import load_chain

CHAIN = """\
name: parts-test
rails:
  vdd: 3.3 V
  vmid: 1.65 V
{include}source:
  name: src
  kind: sensor
  amplitude: 50 mV
  dc: vmid
  r: 100k
stages:
  - name: adc
    kind: adc
    bits: 12
    fs_low: 0 V
    fs_high: vdd
    r_in: 10k
    ref: vmid
{candidates}"""

FOLLOWER = """\
  - name: {name}
    kind: opamp_follower
    gbw: 1 MHz
    i_supply: 100 µA
{cost}"""


BIAS = """\
    input_bias:
      c: {c}
      r_bias: 10M
      bias: {bias}
"""


def write(path, text):
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return str(path)


def chain_file(tmp_path, include="", candidates="", name="chain.yaml"):
    return write(tmp_path / "proj" / name, CHAIN.format(include=include, candidates=candidates))


def parts(tmp_path, rel, body):
    return write(tmp_path / "proj" / rel, body)


def run_cli(argv, capsys):
    code = main(argv)
    out = capsys.readouterr()
    return code, out.out, out.err


def test_parts_file_and_inline_candidates_load_with_costs(tmp_path):
    parts(tmp_path, "parts/a.yaml", "candidates:\n" + FOLLOWER.format(
        name="op_a", cost="    cost:\n      price: 0.5\n      count: 2\n"))
    inline = "candidates:\n" + FOLLOWER.format(name="op_b", cost="    cost:\n      power: 3 mW\n")
    c = load_chain(chain_file(tmp_path, include="include: parts/a.yaml\n", candidates=inline))
    cands = candidates_of(c)
    assert [x.name for x in cands] == ["op_a", "op_b"]
    assert cands[0].price == 0.5 and cands[0].count == 2 and cands[0].power_w is None
    assert cands[1].power_w == pytest.approx(3e-3) and cands[1].price is None
    # the default v_pos of an op-amp is the chain's 'vdd' rail: resolved against the including chain
    assert cands[0].stage.params["v_pos"] == pytest.approx(3.3)
    assert cands[0].path.endswith(os.path.join("parts", "a.yaml"))


def test_a_candidate_with_an_input_bias_network(tmp_path):
    parts(tmp_path, "parts/a.yaml", "candidates:\n" + FOLLOWER.format(name="op_mid", cost=BIAS.format(
        c="100 nF", bias="vmid")))
    (c,) = candidates_of(load_chain(chain_file(tmp_path, include="include: parts/a.yaml\n")))
    assert c.biased and c.input_bias.kind == "ac_coupling"
    assert c.input_bias.params == {"c": pytest.approx(100e-9), "r_bias": pytest.approx(10e6),
                                   "bias": pytest.approx(1.65)}          # the including chain's vmid
    assert c.input_bias.raw["__rails__"] == {"bias": "vmid"}             # written back by name


def test_nested_includes_resolve_relative_to_each_file(tmp_path):
    parts(tmp_path, "parts/top.yaml", "include: [deeper/more.yaml]\n")
    parts(tmp_path, "parts/deeper/more.yaml", "candidates:\n" + FOLLOWER.format(name="deep", cost=""))
    c = load_chain(chain_file(tmp_path, include="include: [parts/top.yaml]\n"))
    assert [x.name for x in candidates_of(c)] == ["deep"]


def test_project_root_is_the_git_work_tree(tmp_path):
    (tmp_path / "repo" / ".git").mkdir(parents=True)
    f = write(tmp_path / "repo" / "chains" / "x.yaml", "name: x\n")
    assert project_root(f) == os.path.realpath(tmp_path / "repo")
    g = write(tmp_path / "loose" / "y.yaml", "name: y\n")
    assert project_root(g) == os.path.realpath(tmp_path / "loose")


def test_the_demo_parts_file_loads_into_every_demo_chain_that_includes_it():
    here = os.path.join(os.path.dirname(__file__), "..", "chains")
    for name in ("hydrophone_direct.yaml", "hydrophone_buffered.yaml", "vibration_fanout.yaml"):
        c = load_chain(os.path.join(here, name))
        kinds = {x.kind for x in candidates_of(c)}
        assert kinds == {"source_follower", "emitter_follower", "opamp_follower"}, name


BAD = [
    # (what, parts file text or None, include line, inline candidates, expected line, field, words)
    ("not a follower", "candidates:\n  - name: lp\n    kind: rc_lowpass\n    r: 1k\n    c: 1 nF\n",
     "include: [p.yaml]\n", "", ("p.yaml", 3), "kind", "not a follower-type stage"),
    ("price in volts", "candidates:\n" + FOLLOWER.format(name="x", cost="    cost:\n      price: 5 V\n"),
     "include: [p.yaml]\n", "", ("p.yaml", 7), "x.cost.price", "volts given"),
    ("power in amperes", "candidates:\n" + FOLLOWER.format(name="x", cost="    cost:\n      power: 2 mA\n"),
     "include: [p.yaml]\n", "", ("p.yaml", 7), "x.cost.power", "amperes given"),
    ("count not whole", "candidates:\n" + FOLLOWER.format(name="x", cost="    cost:\n      count: 1.5\n"),
     "include: [p.yaml]\n", "", ("p.yaml", 7), "x.cost.count", "whole number"),
    ("unknown cost key", "candidates:\n" + FOLLOWER.format(name="x", cost="    cost:\n      prise: 1\n"),
     "include: [p.yaml]\n", "", ("p.yaml", 7), "x.cost.prise", "did you mean 'price'"),
    ("missing include", None, "include: [nowhere.yaml]\n", "", ("chain.yaml", 5), "include", "does not exist"),
    ("escaping include", None, "include: [../outside.yaml]\n", "", ("chain.yaml", 5), "include",
     "outside the project"),
    ("candidate with from", None, "", "candidates:\n  - name: x\n    kind: opamp_follower\n    from: src\n"
     "    gbw: 1 MHz\n", ("chain.yaml", 22), "from", "not connected"),
    ("unknown rail", "candidates:\n" + FOLLOWER.format(name="x", cost="") .replace("gbw", "v_neg: vss\n    gbw"),
     "include: [p.yaml]\n", "", ("p.yaml", 4), "x.v_neg", "not a declared rail"),
    ("input bias in volts", "candidates:\n" + FOLLOWER.format(name="x", cost=BIAS.format(c="100 V", bias="vmid")),
     "include: [p.yaml]\n", "", ("p.yaml", 7), "x.input_bias.c", "volts given"),
    ("input bias to an unknown rail", "candidates:\n" + FOLLOWER.format(name="x", cost=BIAS.format(
        c="100 nF", bias="vneg")), "include: [p.yaml]\n", "", ("p.yaml", 9), "x.input_bias.bias",
     "not a declared rail of chain 'parts-test'"),
    ("input bias with a kind", "candidates:\n" + FOLLOWER.format(name="x", cost=BIAS.format(
        c="100 nF", bias="vmid") + "      kind: divider\n"), "include: [p.yaml]\n", "", ("p.yaml", 10),
     "x.input_bias.kind", "no field 'kind'"),
    ("input bias not a mapping", "candidates:\n" + FOLLOWER.format(name="x", cost="    input_bias: vmid\n"),
     "include: [p.yaml]\n", "", ("p.yaml", 6), "x.input_bias", "is a mapping"),
    ("input bias without its resistor", "candidates:\n" + FOLLOWER.format(name="x", cost=BIAS.format(
        c="100 nF", bias="vmid").replace("      r_bias: 10M\n", "")), "include: [p.yaml]\n", "", ("p.yaml", 7),
     "x.input_bias.r_bias", "missing required field"),
    ("duplicate names", "candidates:\n" + FOLLOWER.format(name="x", cost="") + FOLLOWER.format(name="x", cost=""),
     "include: [p.yaml]\n", "", ("p.yaml", 6), "name", "used twice"),
]


@pytest.mark.parametrize("what,ptext,inc,inline,where,field,words", BAD, ids=[b[0] for b in BAD])
def test_bad_candidates_are_one_located_message(tmp_path, capsys, what, ptext, inc, inline, where, field, words):
    if ptext is not None:
        parts(tmp_path, "p.yaml", ptext)
    write(tmp_path / "outside.yaml", "candidates: []\n")
    f = chain_file(tmp_path, include=inc, candidates=inline)
    with pytest.raises(SpecError) as exc:
        load_chain(f)
    err = exc.value
    assert os.path.basename(err.file) == where[0] and err.line == where[1] and err.field == field, str(err)
    assert words in err.message
    code, out, errtext = run_cli(["buffers", f], capsys)
    assert code == 2 and "Traceback" not in errtext and errtext.count("\n") == 1
    assert f"{where[0]}:{where[1]}: {field}:" in errtext


def test_include_cycle_is_refused(tmp_path):
    parts(tmp_path, "a.yaml", "include: [b.yaml]\n")
    parts(tmp_path, "b.yaml", "include: [a.yaml]\n")
    with pytest.raises(SpecError) as exc:
        load_chain(chain_file(tmp_path, include="include: [a.yaml]\n"))
    assert "include cycle: a.yaml → b.yaml → a.yaml" in exc.value.message
    assert os.path.basename(exc.value.file) == "b.yaml" and exc.value.line == 1


def test_symlink_that_leaves_the_project_is_refused(tmp_path):
    write(tmp_path / "elsewhere" / "p.yaml", "candidates: []\n")
    (tmp_path / "proj").mkdir()
    os.symlink(tmp_path / "elsewhere" / "p.yaml", tmp_path / "proj" / "p.yaml")
    with pytest.raises(SpecError) as exc:
        load_chain(chain_file(tmp_path, include="include: [p.yaml]\n"))
    assert "outside the project" in exc.value.message


@pytest.mark.parametrize("argv,words", [
    (["--min-headroom", "0.1 V", "--headroom-nodes", "src,nope"], "'nope' is not a node"),
    (["--interface", "nope"], "'nope' is not an interface"),
    (["--min-gain", "3 V"], "--min-gain"),
    (["--max-power", "2 mA"], "--max-power"),
])
def test_bad_options_exit_2(tmp_path, capsys, argv, words):
    inline = "candidates:\n" + FOLLOWER.format(name="x", cost="")
    f = chain_file(tmp_path, candidates=inline)
    code, out, err = run_cli(["buffers", f, *argv], capsys)
    assert code == 2 and words in err and "Traceback" not in err


def test_no_candidates_is_a_usage_error(tmp_path, capsys):
    code, out, err = run_cli(["buffers", chain_file(tmp_path)], capsys)
    assert code == 2 and "no candidate buffers" in err
