"""The cascade engine against lcapy's symbolic nodal analysis.

For each chain the small-signal equivalent is written out here as an lcapy
netlist (node 1 is the sensor's EMF, node 0 ground), lcapy solves it exactly
in s, and the result is evaluated at s = j2πf.  The engine must agree to
1e-9 relative on every node voltage (V_node/V_EMF) and on the impedances
checked.  Device small-signal values (gm, gmb, ro, rπ) are taken from the
chain's own operating point: this file checks the network algebra (ABCD
cascade, loading, fan-out); the operating points are checked against ngspice
and the textbook formulas elsewhere.

lcapy's controlled-current-source sign is the opposite of SPICE's:
``G n+ n- c+ c- g`` drives g·(V(c+) − V(c-)) *into* node n+ (checked below).
"""
from __future__ import annotations

import numpy as np
import pytest

from chainplan.engine.budget import evaluate
from conftest import FAN_OUT_SPEC, chain_from

FREQS = np.array([10.0, 300.0, 1591.5494, 5e3, 1e5, 1e7])
REL = 1e-9


@pytest.fixture(scope="module")
def lcapy():
    """lcapy (and sympy) import once per module: about a second."""
    return pytest.importorskip("lcapy")


def _numeric(expr, freqs):
    import sympy as sp
    e = expr.sympy
    syms = list(e.free_symbols)
    assert len(syms) <= 1, f"unexpected symbols in {e}"
    if not syms:
        return np.full(len(freqs), complex(e))
    return np.asarray(sp.lambdify(syms[0], e, "numpy")(2j * np.pi * freqs), dtype=complex)


def transfer(lcapy, netlist, node, freqs=FREQS):
    """V(node)/V(1) with a unit s-domain source at node 1.  (Circuit.transfer is not
    used: for a source resistor between nodes 1 and 2 it returned V2/V1 = 1.)"""
    return _numeric(lcapy.Circuit("Vemf 1 0 s 1\n" + netlist)[node].V(lcapy.s), freqs)


def impedance(lcapy, netlist, node, freqs=FREQS):
    """Impedance from ``node`` to ground with node 1 (the EMF) shorted to ground."""
    return _numeric(lcapy.Circuit(netlist + "\nW 1 0").impedance(node, 0), freqs)


def test_lcapy_controlled_source_sign(lcapy):
    """The sign convention the netlists below rely on."""
    h = transfer(lcapy, "Rin 1 0 1\nG1 2 0 1 0 0.01\nR2 2 0 100", 2, np.array([1.0]))
    assert h[0] == pytest.approx(+1.0)       # SPICE's G would give −1


# ---------------------------------------------------------------------------

RC2 = """
name: rc2
source: {name: src, kind: sensor, amplitude: 1 V, r: 1k}
stages:
  - {name: rc1, kind: rc_lowpass, r: 10k, c: 10 nF}
  - {name: rc2, kind: rc_lowpass, r: 10k, c: 10 nF}
  - {name: rl, kind: load, r_in: 100k, c_in: 100 pF}
"""
RC2_NET = """
Rs 1 2 1000
R1 2 3 10000
C1 3 0 1e-8
R2 3 4 10000
C2 4 0 1e-8
RL 4 0 100000
CL 4 0 1e-10
"""


def test_bilateral_rc_sections(lcapy):
    """Two RC sections loading each other: the second section's input impedance
    depends on its load and the first's output on its source."""
    ev = evaluate(chain_from(RC2), f_hz=FREQS)
    for name, n in (("src", 2), ("rc1", 3), ("rc2", 4)):
        np.testing.assert_allclose(ev.gain(name)[0], transfer(lcapy, RC2_NET, n), rtol=REL)
    # input impedance of rc1 as connected, and the Thevenin impedance at the output
    zin_ref = _numeric(lcapy.Circuit(RC2_NET.replace("Rs 1 2 1000", "")).impedance(2, 0), FREQS)
    np.testing.assert_allclose(1 / ev.ac.y_in["rc1"][0], zin_ref, rtol=REL)
    a, b = ev.ac.row["rc2"]
    zth_ref = impedance(lcapy, RC2_NET.replace("RL 4 0 100000", "").replace("CL 4 0 1e-10", ""), 4)
    np.testing.assert_allclose((b / a)[0], zth_ref, rtol=REL)


def test_naive_macro_model_would_fail_here(lcapy):
    """The same chain through a Zin/Zout/gain macro model (each section's gain and
    impedances taken unloaded, then loading factors multiplied in) misses by
    more than 5 %: the bilateral check above has teeth."""
    s = 2j * np.pi * FREQS
    r, c, rs = 10e3, 10e-9, 1e3
    zl = 1 / (1 / 100e3 + s * 1e-10)
    av, zin, zout = 1 / (1 + s * r * c), r + 1 / (s * c), 1 / (1 / r + s * c)
    naive = zin / (zin + rs) * av * zin / (zin + zout) * av * zl / (zl + zout)
    exact = transfer(lcapy, RC2_NET, 4)
    assert np.max(np.abs(naive / exact - 1)) > 0.05


# ---------------------------------------------------------------------------

FAN_NET = """
Rs 1 2 2000
Cs 1 2 1e-9
Rf 2 3 1000
Rlp 3 4 4700
Clp 4 0 1e-8
Radc 4 0 50000
Cadc 4 0 2e-11
Rt 3 5 10000
Rb 5 0 10000
Rm 5 0 20000
Rcab 3 6 1
Ccab 6 0 1e-9
"""


def test_fan_out(lcapy):
    """One node (feed) driving three branches; each branch sees the source loaded by its siblings."""
    ev = evaluate(chain_from(FAN_OUT_SPEC), f_hz=FREQS)
    for name, n in (("src", 2), ("feed", 3), ("lp", 4), ("div", 5), ("cab", 6)):
        np.testing.assert_allclose(ev.gain(name)[0], transfer(lcapy, FAN_NET, n), rtol=REL, err_msg=name)
    # Thevenin impedance the divider branch sees at 'feed': source + series R ‖ the other two branches
    a, b = ev.ac.branch_row["div"]
    net = "\n".join(ln for ln in FAN_NET.splitlines() if not ln.startswith(("Rt", "Rb", "Rm")))
    np.testing.assert_allclose((b / a)[0], impedance(lcapy, net, 3), rtol=REL)


# ---------------------------------------------------------------------------

SF = """
name: sf-ac
rails: {vdd: 3.3 V}
source: {name: src, kind: sensor, amplitude: 10 mV, r: 1meg, c: 100 pF}
stages:
  - {name: cpl, kind: ac_coupling, c: 10 nF, r_bias: 10meg, bias: 2 V}
  - name: sf
    kind: source_follower
    kp: 100 µA/V²
    w_over_l: 50
    vth0: 0.6 V
    lambda: 0.05 /V
    gamma: 0.5 √V
    phi: 0.7 V
    i_bias: 100 µA
    r_bias: 500k
    cgs: 2 pF
    cgd: 0.5 pF
  - {name: lp, kind: rc_lowpass, r: 1k, c: 1 nF}
  - {name: rl, kind: load, r_in: 10k, c_in: 10 pF}
"""


def test_source_follower_small_signal_network(lcapy):
    """Source follower with body effect, ro, Cgs (bootstrapped) and Cgd between a
    high-impedance AC-coupled source and an RC load (hybrid-π equivalent: Sedra &
    Smith, *Microelectronic Circuits*, from memory)."""
    ev = evaluate(chain_from(SF), f_hz=FREQS)
    v = ev.dc.ops["sf"].values
    gm, gmb, ro = (float(np.ravel(v[k])[0]) for k in ("gm_s", "gmb_s", "ro_ohm"))
    assert gmb > 0.1 * gm                     # the body effect is really in play
    net = f"""
Rs 1 2 1000000
Cs 1 2 1e-10
Cc 2 3 1e-8
Rb 3 0 10000000
Cgs 3 4 2e-12
Cgd 3 0 5e-13
Gm 4 0 3 4 {gm!r}
Gmb 4 0 0 4 {gmb!r}
Ro 4 0 {ro!r}
Rbias 4 0 500000
Rlp 4 5 1000
Clp 5 0 1e-9
RL 5 0 10000
CL 5 0 1e-11
"""
    for name, n in (("src", 2), ("cpl", 3), ("sf", 4), ("lp", 5)):
        np.testing.assert_allclose(ev.gain(name)[0], transfer(lcapy, net, n), rtol=REL, err_msg=name)
    # the follower's input impedance as connected (Cgd plus Cgs bootstrapped by the gain)
    follower_on = "\n".join(ln for ln in net.splitlines() if not ln.startswith(("Rs ", "Cs ", "Cc ", "Rb ")))
    zin = lcapy.Circuit(follower_on).impedance(3, 0)
    np.testing.assert_allclose(1 / ev.ac.y_in["sf"][0], _numeric(zin, FREQS), rtol=REL)


# ---------------------------------------------------------------------------

EF = """
name: ef-ac
temperature: 300 K
rails: {vdd: 5 V}
source: {name: src, kind: sensor, amplitude: 10 mV, dc: 2.5 V, r: 47k}
stages:
  - {name: ef, kind: emitter_follower, beta: 80, i_s: 1e-15 A, va: 60 V, r_e: 4.7k}
  - {name: lp, kind: rc_lowpass, r: 220, c: 10 nF}
  - {name: rl, kind: load, r_in: 1k}
"""


def test_emitter_follower_small_signal_network(lcapy):
    """Bilateral emitter follower (rπ between base and emitter, gm·vbe, ro and RE at the
    emitter) between a 47 kΩ source and an RC load (Sedra & Smith, hybrid-π, from memory)."""
    ev = evaluate(chain_from(EF), f_hz=FREQS)
    v = ev.dc.ops["ef"].values
    gm, rpi, ro = (float(np.ravel(v[k])[0]) for k in ("gm_s", "rpi_ohm", "ro_ohm"))
    net = f"""
Rs 1 2 47000
Rpi 2 3 {rpi!r}
Gm 3 0 2 3 {gm!r}
Ro 3 0 {ro!r}
Re 3 0 4700
Rlp 3 4 220
Clp 4 0 1e-8
RL 4 0 1000
"""
    for name, n in (("src", 2), ("ef", 3), ("lp", 4)):
        np.testing.assert_allclose(ev.gain(name)[0], transfer(lcapy, net, n), rtol=REL, err_msg=name)
    a, b = ev.ac.row["ef"]
    np.testing.assert_allclose((b / a)[0], impedance(lcapy, net.split("Rlp")[0], 3), rtol=REL)


# ---------------------------------------------------------------------------

def opamp_elements(a0_db, gbw, r_out, plus, minus, out):
    """A single-pole op-amp built from elements: a VCCS of A0·(V+ − V−) into 1 Ω ‖ C with
    C = A0/(2π·GBW) gives A(s) = A0/(1 + s·A0/(2π·GBW)); a unity VCVS and Ro follow
    (the macro model of Franco, *Design with Operational Amplifiers*, from memory)."""
    a0 = 10 ** (a0_db / 20)
    return (f"Ga x 0 {plus} {minus} {a0!r}\nRx x 0 1\nCx x 0 {a0 / (2 * np.pi * gbw)!r}\n"
            f"E1 y 0 x 0 1\nRo y {out} {r_out}")


INV = """
name: inv-ac
rails: {vdd: 5 V, vss: -5 V}
source: {name: src, kind: sensor, amplitude: 10 mV, r: 1k}
stages:
  - name: amp
    kind: opamp_inverting
    gbw: 1 MHz
    a0: 80 dB
    r_out: 100
    r_f: 47k
    r_g: 4.7k
    v_neg: vss
  - {name: rl, kind: load, r_in: 2k, c_in: 1 nF}
"""


def test_opamp_inverting_network(lcapy):
    """Inverting stage around the element-level single-pole op-amp (opamp_elements)."""
    ev = evaluate(chain_from(INV), f_hz=FREQS)
    net = f"""
Rs 1 2 1000
Rg 2 3 4700
Rf 3 4 47000
{opamp_elements(80, 1e6, 100, plus="0", minus="3", out="4")}
RL 4 0 2000
CL 4 0 1e-9
"""
    for name, n in (("src", 2), ("amp", 4)):
        np.testing.assert_allclose(ev.gain(name)[0], transfer(lcapy, net, n), rtol=REL, err_msg=name)
    np.testing.assert_allclose(1 / ev.ac.y_in["amp"][0],
                               _numeric(lcapy.Circuit(net.replace("Rs 1 2 1000", "")).impedance(2, 0), FREQS),
                               rtol=REL)


NONINV = """
name: noninv-ac
rails: {vdd: 5 V, vss: -5 V}
source: {name: src, kind: sensor, amplitude: 10 mV, r: 10k}
stages:
  - name: amp
    kind: opamp_noninverting
    gbw: 2 MHz
    a0: 70 dB
    r_out: 200
    r_in: 1meg
    c_in: 5 pF
    r_f: 9k
    r_g: 1k
    v_neg: vss
  - {name: rl, kind: load, r_in: 600, c_in: 2 nF}
"""


def test_opamp_noninverting_network(lcapy):
    """Non-inverting stage, same element-level op-amp as above, with its input R ‖ C
    at both inputs (the − input's in the feedback network, issue 11 item 6) and Ro
    loaded by the feedback divider and a 600 Ω ‖ 2 nF load."""
    ev = evaluate(chain_from(NONINV), f_hz=FREQS)
    net = f"""
Rs 1 2 10000
Rin 2 0 1000000
Cin 2 0 5e-12
{opamp_elements(70, 2e6, 200, plus="2", minus="3", out="4")}
Rf 4 3 9000
Rg 3 0 1000
Rinm 3 0 1000000
Cinm 3 0 5e-12
RL 4 0 600
CL 4 0 2e-9
"""
    for name, n in (("src", 2), ("amp", 4)):
        np.testing.assert_allclose(ev.gain(name)[0], transfer(lcapy, net, n), rtol=REL, err_msg=name)
    a, b = ev.ac.row["amp"]
    unloaded = net.replace("RL 4 0 600", "").replace("CL 4 0 2e-9", "")
    np.testing.assert_allclose((b / a)[0], impedance(lcapy, unloaded, 4), rtol=REL)
