"""The core against closed-form textbook results.

Each expected value is computed here, independently of chainplan's own code
paths: device operating points are solved again with scipy's root finder from
the square-law / exponential device equations, small-signal parameters are
taken as the partial derivatives of those equations, and the stage figures
come from the book formulas named beside each check.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from chainplan.engine.budget import analyse, evaluate
from conftest import chain_from, par

# CODATA 2018 (exact in the 2019 SI), written out here rather than imported.
K_B, Q_E = 1.380649e-23, 1.602176634e-19


def stage(b, name):
    return next(s for s in b.stages if s.name == name)


def node(b, name):
    return next(n for n in b.nodes if n.name == name)


def iface(b, to):
    return next(r for r in b.interfaces if r.to == to)


# ---------------------------------------------------------------------------
# MOSFET source follower

SF_SPEC = """
name: sf-check
rails: {{vdd: 3.3 V}}
source: {{name: src, kind: sensor, amplitude: 10 mV, dc: 2.0 V}}
stages:
  - name: sf
    kind: source_follower
    kp: 100 µA/V²
    w_over_l: 50
    vth0: 0.6 V
    lambda: 0.05 /V
    gamma: 0.5 √V
    phi: 0.7 V
    bulk: {bulk}
    r_s: 20k
{load}
analysis: {{f_ref: 1 kHz}}
"""
LOAD = """\
  - name: rl
    kind: load
    r_in: 10k
"""
KP, WL, VTO, LAM, GAM, PHI, VDD, VG, RS, RL = 100e-6, 50, 0.6, 0.05, 0.5, 0.7, 3.3, 2.0, 20e3, 10e3


def _sf_expected(body: bool, r_load: float | None):
    """Square-law source follower solved from scratch (Sedra & Smith, *Microelectronic
    Circuits*, MOSFET chapter; Razavi, *Design of Analog CMOS Integrated Circuits*,
    §2.2 and §3.4; from memory)."""
    g_load = 0.0 if r_load is None else 1.0 / r_load

    def vth(vs):
        return VTO + (GAM * (math.sqrt(PHI + vs) - math.sqrt(PHI)) if body else 0.0)

    def kcl(vs):   # Id(VS) minus the current RS (and RL) take from the source node
        vov = max(VG - vs - vth(vs), 0.0)
        return 0.5 * KP * WL * vov ** 2 * (1 + LAM * (VDD - vs)) - vs * (1 / RS + g_load)

    vs = brentq(kcl, 0.0, VG - VTO - 1e-9, xtol=1e-15)
    vov, vds = VG - vs - vth(vs), VDD - vs
    i_d = 0.5 * KP * WL * vov ** 2 * (1 + LAM * vds)
    gm = KP * WL * vov * (1 + LAM * vds)          # ∂Id/∂VGS
    gds = 0.5 * KP * WL * vov ** 2 * LAM          # ∂Id/∂VDS
    gmb = gm * GAM / (2 * math.sqrt(PHI + vs)) if body else 0.0   # Razavi eq. (2.22)-(2.24), from memory
    ro = 1 / gds
    r = par(RS, ro) if r_load is None else par(RS, ro, r_load)
    av = gm * r / (1 + (gm + gmb) * r)            # follower gain, Razavi §3.4 / Sedra & Smith, from memory
    rout = par(1 / (gm + gmb), ro, RS)            # follower output resistance, same sources
    return dict(vs=vs, id=i_d, gm=gm, gmb=gmb, ro=ro, av=av, rout=rout)


@pytest.mark.parametrize("body", [False, True], ids=["bulk-at-source", "body-effect"])
@pytest.mark.parametrize("loaded", [False, True], ids=["open", "10k-load"])
def test_source_follower_gain_and_output_resistance(body, loaded):
    spec = SF_SPEC.format(bulk="low" if body else "source", load=LOAD if loaded else "")
    b = analyse(chain_from(spec))
    exp = _sf_expected(body, RL if loaded else None)
    op = stage(b, "sf").op
    assert node(b, "sf").dc_v == pytest.approx(exp["vs"], abs=1e-9)
    assert op["id_a"] == pytest.approx(exp["id"], rel=1e-9)
    assert op["gm_s"] == pytest.approx(exp["gm"], rel=1e-9)
    assert op["gmb_s"] == pytest.approx(exp["gmb"], rel=1e-9, abs=1e-15)
    assert op["ro_ohm"] == pytest.approx(exp["ro"], rel=1e-9)
    # Av = gm·R/(1 + (gm + gmb)·R), R = RS ‖ ro ‖ RL (Razavi §3.4, Sedra & Smith; from memory)
    assert stage(b, "sf").gain == pytest.approx(exp["av"], rel=1e-9)
    # Rout = 1/(gm + gmb) ‖ ro ‖ RS (same sources)
    assert stage(b, "sf").zout_ohm == pytest.approx(exp["rout"], rel=1e-9)


def test_body_effect_lowers_follower_gain():
    """With the bulk on ground the gain is bounded by gm/(gm + gmb) < 1 (Razavi §3.4, from memory)."""
    with_body = analyse(chain_from(SF_SPEC.format(bulk="low", load="")))
    without = analyse(chain_from(SF_SPEC.format(bulk="source", load="")))
    op = stage(with_body, "sf").op
    assert stage(with_body, "sf").gain < op["gm_s"] / (op["gm_s"] + op["gmb_s"]) < stage(without, "sf").gain


def test_follower_with_10mS_has_about_100_ohm_output():
    """Common practice: a follower's output resistance is about 1/gm, 100 Ω at gm = 10 mS.
    Device chosen for gm = 10 mS: Id = 1 mA and Vov = 0.2 V (gm = 2·Id/Vov) need
    k'·W/L = 2·Id/Vov² = 50 mA/V²; λ = 0 and the bulk on the source (no gmb, no ro)."""
    b = analyse(chain_from("""
        name: gm10
        rails: {vdd: 5 V}
        source: {name: src, kind: sensor, amplitude: 10 mV, dc: 2.5 V}
        stages:
          - name: sf
            kind: source_follower
            kp: 100 µA/V²
            w_over_l: 500
            vth0: 0.7 V
            bulk: source
            i_bias: 1 mA
    """))
    assert stage(b, "sf").op["gm_s"] == pytest.approx(10e-3, rel=1e-9)
    assert stage(b, "sf").zout_ohm == pytest.approx(100.0, rel=1e-9)    # common practice: 1/gm
    assert node(b, "sf").dc_v == pytest.approx(2.5 - 0.7 - 0.2, abs=1e-9)   # VS = VG − Vth − Vov


# ---------------------------------------------------------------------------
# Passive networks

def test_divider_loading():
    """Divider between a 1 kΩ source and a 10 kΩ load (Ohm's and Kirchhoff's laws;
    Horowitz & Hill, *The Art of Electronics*, ch. 1, Thevenin equivalent, from memory)."""
    rs, rt, rb, rl, vdc = 1e3, 9e3, 10e3, 10e3, 3.0
    b = analyse(chain_from("""
        name: div
        source: {name: src, kind: sensor, amplitude: 100 mV, dc: 3 V, r: 1k}
        stages:
          - {name: div, kind: divider, r_top: 9k, r_bottom: 10k}
          - {name: rl, kind: load, r_in: 10k}
    """))
    ratio = par(rb, rl) / (rs + rt + par(rb, rl))           # EMF to output: 1/3
    assert b.gain_db == pytest.approx(20 * math.log10(ratio), abs=1e-12)
    assert node(b, "div").dc_v == pytest.approx(vdc * ratio, rel=1e-12)
    # the stage's own gain is from its input node: RB‖RL/(RT + RB‖RL) = 5/14
    assert stage(b, "div").gain == pytest.approx(par(rb, rl) / (rt + par(rb, rl)), rel=1e-12)
    assert stage(b, "div").zin_ohm == pytest.approx(rt + par(rb, rl), rel=1e-12)
    zth = par(rs + rt, rb)                                    # Thevenin of source + divider: 5 kΩ
    assert stage(b, "div").zout_ohm == pytest.approx(zth, rel=1e-12)
    # loading loss −20·log10(ZL/(ZL + Zth)) dB lost at each interface (positive = lost)
    assert iface(b, "rl").loss_db == pytest.approx(-20 * math.log10(rl / (rl + zth)), abs=1e-12)
    zin = rt + par(rb, rl)
    assert iface(b, "div").loss_db == pytest.approx(-20 * math.log10(zin / (zin + rs)), abs=1e-12)
    assert iface(b, "rl").loss_db == pytest.approx(3.5218, abs=1e-4)   # −20·log10(2/3)


RC_SPEC = """
name: rc
source: {{name: src, kind: sensor, amplitude: 1 V}}
stages:
  - {{name: rc, kind: {kind}, r: 10k, c: 1.5 nF}}
analysis: {{f_ref: {f_ref}, f_start: 1 Hz, f_stop: 100 MHz, points: 801}}
"""
RC_CORNER_HZ = 1 / (2 * math.pi * 10e3 * 1.5e-9)    # 1/(2πRC) = 10.61 kHz


def test_rc_lowpass_corner():
    """f_high of an RC low-pass between an ideal source and an open load is 1/(2πRC)
    (any circuits text, e.g. Horowitz & Hill, *The Art of Electronics*, ch. 1, from memory)."""
    chain = chain_from(RC_SPEC.format(kind="rc_lowpass", f_ref="10 Hz"))
    b = analyse(chain)
    assert b.f_low_hz is None
    # the budget interpolates between grid points (100 per decade here)
    assert b.f_high_hz == pytest.approx(RC_CORNER_HZ, rel=3e-4)
    h = evaluate(chain, f_hz=np.array([RC_CORNER_HZ])).gain()[0, 0]
    assert h == pytest.approx(1 / (1 + 1j), rel=1e-12)          # exactly −3.01 dB, −45° at the corner


def test_rc_highpass_corner():
    chain = chain_from(RC_SPEC.format(kind="rc_highpass", f_ref="10 MHz"))
    b = analyse(chain)
    assert b.f_high_hz is None
    assert b.f_low_hz == pytest.approx(RC_CORNER_HZ, rel=3e-4)   # 1/(2πRC), same source
    h = evaluate(chain, f_hz=np.array([RC_CORNER_HZ])).gain()[0, 0]
    assert h == pytest.approx(1 / (1 - 1j), rel=1e-12)


# ---------------------------------------------------------------------------
# Op-amp stages with a finite open-loop gain

def _open_loop(a0_db, gbw, f):
    """The single-pole op-amp: A = A0/(1 + j·f·A0/GBW) (Franco, *Design with Operational
    Amplifiers*, ch. on frequency response, from memory)."""
    a0 = 10 ** (a0_db / 20)
    return a0 / (1 + 1j * f * a0 / gbw)


OPAMP_SPEC = """
name: oa
rails: {{vdd: 5 V, vss: -5 V}}
source: {{name: src, kind: sensor, amplitude: 10 mV}}
stages:
  - name: amp
    kind: {kind}
    gbw: 1 MHz
    a0: 40 dB
    r_out: {r_out}
    v_neg: vss
{extra}analysis: {{f_ref: {f_ref}}}
"""


@pytest.mark.parametrize("f_ref", [10.0, 30e3])
def test_opamp_follower_closed_loop(f_ref):
    """Follower (β = 1): G = A/(1 + A), Zout = Zo/(1 + A) (Sedra & Smith, *Microelectronic
    Circuits*, op-amp chapter; Franco; from memory).  A0 = 100 makes the finite-gain error 1 %."""
    chain = chain_from(OPAMP_SPEC.format(kind="opamp_follower", r_out="50", extra="", f_ref=f_ref))
    ev = evaluate(chain, f_hz=np.array([f_ref]))
    a = _open_loop(40, 1e6, f_ref)
    assert ev.gain("amp")[0, 0] == pytest.approx(a / (1 + a), rel=1e-12)
    aa, bb = ev.ac.row["amp"]
    assert (bb / aa)[0, 0] == pytest.approx(50 / (1 + a), rel=1e-12)


def test_opamp_noninverting_closed_loop():
    """G = A/(1 + Aβ), β = RG/(RF + RG); Zout = Zo/(1 + Aβ) (Sedra & Smith; Franco; from memory).
    The book forms neglect Zo's loading by RF + RG; with Zo/(RF + RG) = 1e-4 they hold to ~1e-4."""
    extra = "    r_f: 90k\n    r_g: 10k\n"
    for f_ref in (10.0, 20e3):
        chain = chain_from(OPAMP_SPEC.format(kind="opamp_noninverting", r_out="10", extra=extra, f_ref=f_ref))
        ev = evaluate(chain, f_hz=np.array([f_ref]))
        a, beta = _open_loop(40, 1e6, f_ref), 0.1
        assert ev.gain("amp")[0, 0] == pytest.approx(a / (1 + a * beta), rel=2e-4)
        aa, bb = ev.ac.row["amp"]
        assert (bb / aa)[0, 0] == pytest.approx(10 / (1 + a * beta), rel=2e-4)
    assert abs(a / (1 + a * beta)) < 9.0     # the finite gain matters: ideal would be 10


def test_opamp_inverting_closed_loop():
    """Inverting stage with Ro = 0: G = −(RF/RG)·Aβ/(1 + Aβ), β = RG/(RF + RG);
    Zin = RG + RF/(1 + A) (Sedra & Smith; Franco; from memory)."""
    extra = "    r_f: 40k\n    r_g: 10k\n"
    for f_ref in (10.0, 5e3):
        chain = chain_from(OPAMP_SPEC.format(kind="opamp_inverting", r_out="0", extra=extra, f_ref=f_ref))
        ev = evaluate(chain, f_hz=np.array([f_ref]))
        a, beta = _open_loop(40, 1e6, f_ref), 10e3 / 50e3
        assert ev.gain("amp")[0, 0] == pytest.approx(-4 * a * beta / (1 + a * beta), rel=1e-12)
        assert (1 / ev.ac.y_in["amp"])[0, 0] == pytest.approx(10e3 + 40e3 / (1 + a), rel=1e-12)


# ---------------------------------------------------------------------------
# BJT stages

@pytest.mark.parametrize("rs", [10e3, 1e6], ids=["10k-source", "1M-source"])
def test_emitter_follower_rin_rout(rs):
    """Emitter follower: Rin = rπ + (β + 1)(RE ‖ RL), Rout = (Rs + rπ)/(β + 1) ‖ RE
    (Sedra & Smith, *Microelectronic Circuits*, common-collector amplifier, from memory),
    with the bias solved from IC = IS·exp(VBE/VT) and the base current through Rs.
    The 1 MΩ source drops most of its DC level across Rs (Rs > (β + 1)·RE‖RL)."""
    b = analyse(chain_from(f"""
        name: ef
        temperature: 300 K
        rails: {{vdd: 5 V}}
        source: {{name: src, kind: sensor, amplitude: 10 mV, dc: 2.5 V, r: {rs:g}}}
        stages:
          - {{name: ef, kind: emitter_follower, beta: 100, i_s: 1e-15 A, r_e: 2k}}
          - {{name: rl, kind: load, r_in: 5k}}
    """))
    beta, i_s, re, rl, vsrc = 100.0, 1e-15, 2e3, 5e3, 2.5
    vt = K_B * 300.0 / Q_E

    def kcl(ve):   # base voltage from the source minus VB implied by the emitter current
        ie = ve / re + ve / rl
        ic = ie * beta / (beta + 1)
        return (vsrc - rs * ie / (beta + 1)) - ve - vt * math.log(ic / i_s)

    ve = brentq(kcl, 0.01, 2.4, xtol=1e-15)
    ic = (ve / re + ve / rl) * beta / (beta + 1)
    gm = ic / vt
    rpi = beta / gm
    ef = stage(b, "ef")
    assert node(b, "ef").dc_v == pytest.approx(ve, abs=1e-9)
    assert node(b, "src").dc_v == pytest.approx(vsrc - rs * ic / beta, abs=1e-9)
    assert ef.op["ic_a"] == pytest.approx(ic, rel=1e-8)
    assert ef.zin_ohm == pytest.approx(rpi + (beta + 1) * par(re, rl), rel=1e-8)
    assert ef.zout_ohm == pytest.approx(par((rs + rpi) / (beta + 1), re), rel=1e-8)
    r = par(re, rl)
    assert ef.gain == pytest.approx((beta + 1) * r / (rpi + (beta + 1) * r), rel=1e-8)


def test_common_emitter_gain():
    """CE with degeneration: Av = −β·RC/(rπ + (β + 1)·RE), Rin = rπ + (β + 1)·RE
    (Sedra & Smith, from memory; VA = ∞ so ro drops out)."""
    chain = chain_from("""
        name: ce
        temperature: 300 K
        rails: {vdd: 10 V}
        source: {name: src, kind: sensor, amplitude: 1 mV, dc: 1.5 V}
        stages:
          - {name: ce, kind: common_emitter, beta: 150, i_s: 2e-15 A, r_c: 4.7k, r_e: 470}
    """)
    b = analyse(chain)
    beta, i_s, rc, re, vb = 150.0, 2e-15, 4.7e3, 470.0, 1.5
    vt = K_B * 300.0 / Q_E
    ve = brentq(lambda v: vb - v - vt * math.log(v / re * beta / (beta + 1) / i_s), 0.1, 1.4, xtol=1e-15)
    ic = ve / re * beta / (beta + 1)
    rpi = beta * vt / ic
    ce = stage(b, "ce")
    assert node(b, "ce").dc_v == pytest.approx(10 - ic * rc, abs=1e-8)
    assert ce.zin_ohm == pytest.approx(rpi + (beta + 1) * re, rel=1e-8)
    assert ce.zout_ohm == pytest.approx(rc, rel=1e-12)
    assert evaluate(chain).gain("ce")[0, 0].real == pytest.approx(-beta * rc / (rpi + (beta + 1) * re), rel=1e-8)


# ---------------------------------------------------------------------------
# MOSFET common source

def test_common_source_gain_and_output_resistance():
    """Degenerated common source with body effect and channel-length modulation:
    Av = −gm·ro·RD/(RD + ro + RS + (gm + gmb)·ro·RS), Rout = RD ‖ (ro + RS + (gm + gmb)·ro·RS)
    (Razavi, *Design of Analog CMOS Integrated Circuits*, §3.3, from memory)."""
    kp, wl, vto, lam, gam, phi, vdd, vg, rd, rs = 200e-6, 20, 0.5, 0.05, 0.4, 0.7, 5.0, 1.2, 10e3, 1e3
    chain = chain_from("""
        name: cs
        rails: {vdd: 5 V}
        source: {name: src, kind: sensor, amplitude: 1 mV, dc: 1.2 V}
        stages:
          - name: cs
            kind: common_source
            kp: 200 µA/V²
            w_over_l: 20
            vth0: 0.5 V
            lambda: 0.05 /V
            gamma: 0.4 √V
            phi: 0.7 V
            r_d: 10k
            r_s: 1k
    """)
    b = analyse(chain)

    def vth(vs):
        return vto + gam * (math.sqrt(phi + vs) - math.sqrt(phi))

    def kcl(vs):
        i_d = vs / rs
        vd = vdd - i_d * rd
        return 0.5 * kp * wl * (vg - vs - vth(vs)) ** 2 * (1 + lam * (vd - vs)) - i_d

    vs = brentq(kcl, 0.0, vg - vto - 1e-9, xtol=1e-15)
    i_d = vs / rs
    vd = vdd - i_d * rd
    vov, vds = vg - vs - vth(vs), vd - vs
    gm = kp * wl * vov * (1 + lam * vds)
    ro = 1 / (0.5 * kp * wl * vov ** 2 * lam)
    gmb = gm * gam / (2 * math.sqrt(phi + vs))
    av = -gm * ro * rd / (rd + ro + rs + (gm + gmb) * ro * rs)
    rout = par(rd, ro + rs + (gm + gmb) * ro * rs)
    assert node(b, "cs").dc_v == pytest.approx(vd, abs=1e-6)
    assert evaluate(chain).gain("cs")[0, 0].real == pytest.approx(av, rel=1e-9)
    assert stage(b, "cs").zout_ohm == pytest.approx(rout, rel=1e-9)
