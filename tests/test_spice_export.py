"""The exported SPICE netlist, simulated by ngspice (Debian package, ``ngspice -b``),
against chainplan's own budget: DC level of every node (2 mV), gain at the
reference frequency (0.5 %), −3 dB band edges (1 %), and the output noise
density where both model the same generators (3 %).  Every demo chain, plus two
test chains that between them use every stage kind the demos do not."""
from __future__ import annotations

import math
import re
import textwrap

import numpy as np
import pytest

from chainplan.engine.budget import analyse
from chainplan.errors import SpecError
from chainplan.spec.loader import load_chain
from chainplan.render.spice import EXPORTERS, export
from chainplan.stages import REGISTRY
from chainplan.stages.passive import Passive
from conftest import DEMO_CHAINS, chain_from
from helpers_ngspice import needs_ngspice, run, run_ac, run_noise, run_op

BJT_MIX = """
name: bjt-mix
description: test chain - bipolar stages, a series resistor, AC coupling, a plain load
temperature: 320 K
rails: {vdd: 5 V, vmid: 2.5 V}
source: {name: src, kind: sensor, amplitude: 10 mV, dc: 2.0 V, r: 100, c: 100 nF}
stages:
  - {name: ef, kind: emitter_follower, beta: 120, va: 80 V, i_s: 2e-15 A, i_bias: 1 mA, r_bias: 200k}
  - {name: link, kind: series_r, r: 100}
  - {name: ce, kind: common_emitter, beta: 150, i_s: 5e-15 A, r_c: 2.2k, r_e: 470}
  - {name: couple, kind: ac_coupling, c: 1 µF, r_bias: 47k, bias: vmid}
  - {name: efr, kind: emitter_follower, beta: 90, r_e: 4.7k}
  - {name: meter, kind: load, r_in: 20k, c_in: 50 pF, ref: vmid}
analysis: {f_ref: 1 kHz, f_start: 1 Hz, f_stop: 100 MHz, points: 401}
"""

MOS_MIX = """
name: mos-mix
description: test chain - MOS stages, macro models, every passive section, an unnamed bias voltage
rails: {vdd: 3.3 V, vmid: 1.65 V}
source: {name: src, kind: sensor, amplitude: 5 mV, dc: 1.1 V, r: 1k}
stages:
  - {name: cs, kind: common_source, kp: 200 µA/V², w_over_l: 10, vth0: 0.5 V, lambda: 0.02 /V,
     gamma: 0.4 √V, r_d: 10k, r_s: 1k}
  - {name: sf, kind: source_follower, kp: 150 µA/V², w_over_l: 50, vth0: 0.45 V, lambda: 0.05 /V,
     bulk: source, r_s: 20k, cgs: 1 pF, cgd: 0.2 pF}
  - {name: div, kind: divider, r_top: 10k, r_bottom: 10k, ref: vmid}
  - {name: cap, kind: shunt_c, c: 1 nF}
  - {name: buf, kind: opamp_follower, gbw: 2 MHz, a0: 100 dB, r_out: 50, r_in: 1G, c_in: 5 pF,
     en: 10 nV/√Hz, in: 1 pA/√Hz}
  - {name: hp, kind: rc_highpass, c: 100 nF, r: 100k, ref: vmid}
  - {name: amp, kind: amplifier, gain: -2, r_in: 100k, r_out: 10, in_ref: vmid, out_ref: 0.92 V,
     en: 20 nV/√Hz}
  - {name: pull, kind: shunt_r, r: 47k, ref: 0.92 V}
  - {name: csl, kind: common_source, kp: 100 µA/V², w: 50 µm, l: 2.5u, vth0: 0.5 V, lambda: 0.03 /V,
     bulk: source, i_load: 100 µA, r_load: 20k, i_load_noise: 2 pA/√Hz}
  - {name: end, kind: load, r_in: 1meg, c_in: 10 pF}
analysis: {f_ref: 1 kHz, f_start: 1 Hz, f_stop: 100 MHz, points: 401}
"""

CASES = [pytest.param(lambda p=p: load_chain(str(p)), id=p.stem) for p in DEMO_CHAINS] + [
    pytest.param(lambda: chain_from(BJT_MIX, "bjt_mix.yaml"), id="bjt_mix"),
    pytest.param(lambda: chain_from(MOS_MIX, "mos_mix.yaml"), id="mos_mix"),
]
_MEAS = re.compile(r"^(f_low|f_high)\s+=\s+([-+0-9.eE]+)", re.M)


def _edges(circuit: str, node: str, a) -> dict:
    """−3 dB edges of V(node) by ngspice's own measure (200 points per decade), as
    chainplan defines them: 3 dB below the passband gain (the largest over the signal
    band, or over the span without one), the last rising crossing below the frequency
    of that gain and the first falling one above it."""
    band = a.band_hz
    rng = f" from={band[0]!r} to={band[1]!r}" if band else ""
    out = run(circuit, [f"ac dec 200 {a.f_start_hz!r} {a.f_stop_hz!r}",
                        f"meas ac g_pass max vdb({node}){rng}",
                        ])
    f_pk = re.search(r"^g_pass\s+=\s+\S+\s+at=\s+([-+0-9.eE]+)", out, re.M).group(1)
    out = run(circuit, [f"ac dec 200 {a.f_start_hz!r} {a.f_stop_hz!r}",
                        f"meas ac g_pass max vdb({node}){rng}",
                        "let edge = g_pass - 3.0103",
                        f"meas ac f_low when vdb({node})=edge rise=last to={f_pk}",
                        f"meas ac f_high when vdb({node})=edge fall=1 from={f_pk}"])
    return {k: float(v) for k, v in _MEAS.findall(out)}


@needs_ngspice
@pytest.mark.parametrize("make", CASES)
def test_ngspice_agrees_with_the_budget(make):
    chain = make()
    b = analyse(chain)
    nl = export(chain)
    circuit = nl.circuit_text()

    op = run_op(circuit)
    for node, spice_node in nl.nodes.items():
        ours = float(np.ravel(b.ev.dc.node_v[node])[0])
        assert abs(op[spice_node] - ours) < 2e-3, f"DC at {node}: ngspice {op[spice_node]} V, chainplan {ours} V"

    a = chain.analysis
    h = run_ac(circuit, nl.output, [a.f_ref_hz])[0]
    ours = abs(complex(np.ravel(b.ev.gain())[0]))
    assert abs(abs(h) / ours - 1) < 0.005, f"gain at f_ref: ngspice {abs(h)}, chainplan {ours}"

    edges = _edges(circuit, nl.output, a)
    for key, ours in (("f_low", b.f_low_hz), ("f_high", b.f_high_hz)):
        if ours is None:
            assert key not in edges, f"ngspice finds {key} = {edges.get(key)} Hz, chainplan none in the span"
        else:
            assert key in edges, f"chainplan finds {key} = {ours} Hz, ngspice none"
            assert abs(edges[key] / ours - 1) < 0.01, f"{key}: ngspice {edges[key]} Hz, chainplan {ours} Hz"


@needs_ngspice
@pytest.mark.parametrize("make", CASES)
def test_ngspice_noise_density_agrees(make):
    """Output noise density at one frequency, where both sides carry the same generators:
    chains whose noise chainplan neglects somewhere (a side branch) are skipped, the
    frequency sits far above every 1/f corner, and the converter's quantisation power
    and declared rail ripple (no SPICE element) are left out of chainplan's sum."""
    noise = pytest.importorskip("chainplan.engine.noise")
    chain = make()
    b = analyse(chain)
    nr = noise.analyse_noise(b.ev)
    if nr.neglected:
        pytest.skip(f"chainplan neglects the noise of {nr.neglected}")
    corners = [float(np.ravel(st.params.get(k, 0.0))[0]) for st in chain.all_stages
               for k in ("en_corner", "in_corner", "flicker_corner")]
    a = chain.analysis
    f = max(a.f_ref_hz, 1000 * max(corners, default=0.0))
    total, _, gens = noise.density_at(b.ev, [f])
    converter = {name for name, psd in gens if name.endswith(("quantisation", "converter noise"))
                 or ": ripple " in name}
    ours = math.sqrt(sum(float(psd[0, 0]) for name, psd in gens if name not in converter))
    nl = export(chain)
    onoise, _ = run_noise(nl.circuit_text(), nl.output, nl.source, [f])
    assert abs(onoise[0] / ours - 1) < 0.03, f"noise at {f} Hz: ngspice {onoise[0]}, chainplan {ours} V/√Hz"


@needs_ngspice
def test_the_netlist_file_runs_as_written_and_prints_the_budget_figures(tmp_path):
    """The whole file (dot analyses for any simulator plus the ngspice control block)."""
    import subprocess
    path = DEMO_CHAINS[0]
    chain = load_chain(str(path))
    b = analyse(chain)
    cir = tmp_path / "chain.cir"
    cir.write_text(export(chain).text(), encoding="utf-8")
    proc = subprocess.run(["ngspice", "-b", str(cir)], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    m = re.search(r"^gain_ref_db\s+=\s+([-+0-9.eE]+)", proc.stdout, re.M)
    assert m, proc.stdout
    assert abs(float(m.group(1)) - b.gain_db) < 0.05          # 0.5 % in magnitude is 0.043 dB
    assert re.search(r"^onoise_total = ", proc.stdout, re.M)
    for node in chain.nodes:
        assert re.search(rf"^v\({node.lower()}\) = ", proc.stdout, re.M)


def test_every_stage_kind_has_a_spice_form():
    missing = [k for k, m in REGISTRY.items() if not isinstance(m, Passive) and k not in EXPORTERS]
    assert not missing


def test_netlist_uses_level1_models_controlled_sources_and_rails():
    chain = load_chain(str(next(p for p in DEMO_CHAINS if p.stem == "ph_probe_dc")))
    text = export(chain).text()
    # the demo runs at 298 K, its parts stated at 25 °C (298.15 K): the card holds KP and VTO moved
    # to 298 K (KP·(T/Tnom)^−1.5, VTO + vth_tc·ΔT with the default −2 mV/K), and says so with tnom = 24.85 °C
    m = re.search(r"^\.model nm_follower nmos level=1 kp=(\S+) vto=(\S+) lambda=0\.05 gamma=0\.5 phi=0\.7 "
                  r"tnom=24\.85$", text, re.M)
    assert m, text
    assert float(m.group(1)) == pytest.approx(1e-4 * (298 / 298.15) ** -1.5, rel=1e-12)
    assert float(m.group(2)) == pytest.approx(0.6 + 2e-3 * 0.15, rel=1e-12)
    assert re.search(r"^Mfollower vdd electrode follower 0 nm_follower ", text, re.M)   # bulk on gnd = 0
    assert re.search(r"^Ifollower_bias follower 0 DC 1e-05$", text, re.M)
    assert re.search(r"^Vvdd vdd 0 DC 3\.3$", text, re.M)
    assert re.search(r"^Escale_buf ", text, re.M) and re.search(r"^Gscale_gm ", text, re.M)
    m = re.search(r"^Velectrode electrode_emf 0 DC 1\.2 AC 1 SIN\(1\.2 (\S+) 1\)$", text, re.M)
    # the amplitude carries the Nernst tempco (3354 ppm/K from 25 °C): at 298 K, 180 mV·(1 − 3354e-6·0.15)
    assert m and float(m.group(1)) == pytest.approx(0.18 * (1 - 3354e-6 * 0.15), rel=1e-9)
    assert ".control" in text and text.rstrip().endswith(".end")
    assert text.isascii()


def test_mosfet_width_and_length_go_on_the_instance():
    """A device given by w and l keeps them (SPICE W, L); one given by W/L alone gets
    W = (W/L)·10 µm at L = 10 µm (ngspice's level 1 depends on the ratio only: the
    DC and AC agreement of mos_mix above checks both)."""
    text = export(chain_from(MOS_MIX, "mos_mix.yaml")).text()
    inst = {ln.split()[0]: ln for ln in text.splitlines() if ln.startswith("M")}
    assert inst["Mcsl"].endswith("W=5e-05 L=2.5e-06"), inst["Mcsl"]
    assert inst["Mcs"].endswith("W=0.0001 L=1e-05"), inst["Mcs"]


def test_case_clashing_and_reserved_names_stay_distinct():
    chain = chain_from("""
        name: clash
        rails: {vdd: 3.3 V}
        source: {name: gnd, kind: sensor, amplitude: 1 mV, r: 1k}
        stages:
          - {name: Stage, kind: series_r, r: 1k}
          - {name: stage, kind: series_r, r: 1k}
          - {name: vdd, kind: shunt_r, r: 10k}
    """)
    nl = export(chain)
    spice = list(nl.nodes.values())
    assert "0" not in spice and "gnd" not in spice
    assert len({nl.nodes["Stage"], nl.nodes["stage"]}) == 2
    assert nl.nodes["vdd"] != "vdd" or "Vvdd" not in nl.text()


# -- what cannot be exported ------------------------------------------------------

@pytest.fixture
def odd_kind(monkeypatch):
    """A stage kind with no SPICE form (as a new kind would be before its exporter is written)."""
    from chainplan.stages.base import Field, StageKind, unilateral

    class Oddity(StageKind):
        kind, title = "oddity", "a kind without a SPICE form"
        FIELDS = {"gain": Field("1", "gain", required=True)}

        def abcd(self, p, s, op):
            return unilateral(0.0, 1.0 / p["gain"], 0.0)

    monkeypatch.setitem(REGISTRY, "oddity", Oddity())
    return textwrap.dedent("""
        name: odd
        source: {name: src, kind: sensor, amplitude: 1 mV, r: 1k}
        stages:
          - name: mystery
            kind: oddity
            gain: 2
    """)


def test_a_stage_without_spice_form_is_named(odd_kind):
    chain = chain_from(odd_kind, "odd.yaml")
    with pytest.raises(SpecError) as exc:
        export(chain)
    e = exc.value
    assert e.line == 5 and e.field == "mystery"
    assert "cannot export stage 'mystery' (kind oddity)" in str(e) and "no SPICE equivalent" in str(e)


def test_cli_refuses_an_unexportable_chain_and_writes_nothing(odd_kind, spec_file, cli, tmp_path):
    path = spec_file(odd_kind, "odd.yaml")
    out = tmp_path / "out" / "odd.cir"
    rc, stdout, err = cli("netlist", path, "-o", str(out))
    assert rc == 2
    assert err.count("\n") == 1 and "mystery" in err and "Traceback" not in err
    assert not out.exists() and not (tmp_path / "out").exists()


def test_cli_writes_the_netlist_and_refuses_an_unwritable_folder(cli, tmp_path):
    path = str(DEMO_CHAINS[0])
    out = tmp_path / "n" / "chain.cir"
    rc, _, err = cli("netlist", path, "-o", str(out))
    assert rc == 0, err
    assert out.read_text(encoding="utf-8").rstrip().endswith(".end")
    blocker = tmp_path / "a_file"
    blocker.write_text("x")
    rc, _, err = cli("netlist", path, "-o", str(blocker / "chain.cir"))
    assert rc == 2 and "cannot write" in err and err.count("\n") == 1
    assert {p.name for p in tmp_path.iterdir()} == {"n", "a_file"}
    assert [p.name for p in (tmp_path / "n").iterdir()] == ["chain.cir"]     # no temporary left behind
