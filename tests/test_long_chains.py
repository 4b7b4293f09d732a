"""Long chains: rows renormalised by powers of two as they are carried stay finite
and exact, DC source relations likewise, and the budget tables summarise what
does not fit.  Checked against the plain unscaled 2×2 product
(test_engine_reference.reference_ac) wherever that product does not overflow."""
from __future__ import annotations

import io

import numpy as np

from conftest import chain_from
from test_engine_reference import reference_ac
from chainplan.api import budget_for
from chainplan.engine.budget import evaluate
from chainplan.engine.noise import analyse_noise

#: one RC section (corner 100 kHz) and one follower per two stages: 10^-2 per pair at 10 MHz
PAIR = ("  - {{name: rc{i}, kind: rc_lowpass, r: 1k, c: 1.6 nF}}\n"
        "  - {{name: buf{i}, kind: opamp_follower, gbw: 1 GHz}}\n")


def ladder(pairs: int, points: int = 40) -> str:
    return ("name: ladder\nrails: {vdd: 5 V, vmid: 2.5 V}\n"
            "source: {name: sensor, kind: sensor, amplitude: 10 mV, dc: 2.5 V, r: 1k}\nstages:\n"
            + "".join(PAIR.format(i=i) for i in range(pairs))
            + "  - {name: adc, kind: adc, bits: 16, fs_low: 0 V, fs_high: vdd}\n"
            + f"analysis: {{f_ref: 10 Hz, f_start: 1 Hz, f_stop: 10 MHz, points: {points}}}\n")


def _rel(x, ref):
    """Largest relative difference; an exact zero of the reference must be an exact zero."""
    x, ref = np.broadcast_arrays(np.asarray(x), np.asarray(ref))
    nz = ref != 0
    assert np.all(x[~nz] == 0)
    return float(np.max(np.abs(x[nz] - ref[nz]) / np.abs(ref[nz]), initial=0.0))


def test_rescaled_rows_equal_the_unscaled_product():
    """100 sections: rows reach ~1e200 at 10 MHz (rescaled, yet no overflow in the plain
    product), and every gain and row equals the plain product to 1e-12."""
    chain = chain_from(ladder(100))
    ev = evaluate(chain)
    assert ev.ac.row_exp, "the rows were never rescaled: the test does not test scaling"
    gains, _, rows, _ = reference_ac(chain, ev.params, ev.dc.ops, ev.f_hz)
    assert all(np.all(np.isfinite(h)) for h in gains.values())
    for nd, h in gains.items():
        assert _rel(ev.ac.node_h[nd], h) < 1e-12, nd
        a, b = ev.ac.full_row(nd)
        assert _rel(a, rows[nd][..., 0, 0]) < 1e-12 and _rel(b, rows[nd][..., 0, 1]) < 1e-12, nd
    top = np.abs(gains[ev.output][0, -1])
    assert 1e-220 < top < 1e-180                    # the regime the test is about


def test_thousand_stage_chain_is_finite_where_the_plain_product_overflows():
    """500 sections (1 000 stages): the plain product overflows to inf/nan at high
    frequencies; the engine's gains stay finite (underflowing to 0 where |H| < 1e-308),
    equal the plain product wherever that is finite, and noise, SNR and ENOB are numbers."""
    chain = chain_from(ladder(500, points=20))
    ev = evaluate(chain)
    with np.errstate(all="ignore"):                  # the plain product overflows: that is the point
        gains, _, _, _ = reference_ac(chain, ev.params, ev.dc.ops, ev.f_hz)
    ref = gains[ev.output]
    h = ev.ac.node_h[ev.output]
    assert not np.all(np.isfinite(ref)), "the plain product did not overflow: the test tests nothing"
    assert np.all(np.isfinite(h))
    fin = np.isfinite(ref) & (ref != 0)
    assert fin.sum() >= 5 and _rel(h[fin], ref[fin]) < 1e-12
    nr = analyse_noise(ev)
    for x in (nr.out_vrms, nr.in_vrms, nr.snr_db, nr.enob_bits):
        assert np.all(np.isfinite(x))
    fast = analyse_noise(evaluate(chain), powers_only=True)
    assert _rel(fast.out_vrms, nr.out_vrms) < 1e-12

def test_thousand_stage_band_edge():
    """n buffered identical RC sections: f_−3dB = f_c·√(2^(1/n) − 1) (the cascade of equal
    first-order poles, common practice); 500 sections at 99.5 kHz: 3.70 kHz.  The first
    section also sees the 1 kΩ source, which lowers the edge a little."""
    b = budget_for(chain_from(ladder(500, points=400)))
    f_c = 1 / (2 * np.pi * 1e3 * 1.6e-9)
    expect = f_c * np.sqrt(2 ** (1 / 500) - 1)
    assert b.f_high_hz is not None and 0.97 * expect < b.f_high_hz < expect


def test_long_passive_ladder_dc_stays_finite():
    """1 200 dividers halve the signal 1 200 times: the DC source relation grows as 2^1200
    without renormalisation; the node levels stay the divider's fixed point."""
    text = ("name: dividers\nrails: {vmid: 2.5 V}\nsource: {name: s, kind: sensor, amplitude: 1 mV, dc: 2.5 V}\n"
            "stages:\n" + "".join(f"  - {{name: d{i}, kind: divider, r_top: 1k, r_bottom: 1k, ref: vmid}}\n"
                                 for i in range(1200))
            + "analysis: {f_ref: 10 Hz, f_start: 1 Hz, f_stop: 1 kHz, points: 10}\n")
    ev = evaluate(chain_from(text))
    assert np.all(np.isfinite([float(np.ravel(v)[0]) for v in ev.dc.node_v.values()]))
    assert abs(float(np.ravel(ev.dc.node_v["d1199"])[0]) - 2.5) < 1e-9


def test_long_tables_show_first_last_and_marked_rows():
    """A 1 000-stage budget prints at most a screenful per table: the first and last rows,
    the marked ones, a count of those left out, and where to find them all."""
    from rich.console import Console
    from chainplan.render.layout import MAX_ROWS
    from chainplan.render.tables import budget_tables
    b = budget_for(chain_from(ladder(500, points=20)))
    out = io.StringIO()
    budget_tables(b, Console(file=out, width=100, color_system=None))
    text = out.getvalue()
    assert "rc0 " in text and "buf499" in text and "… " in text and "more" in text
    assert "--json shows every one" in text
    assert text.count("\n") < 4 * (MAX_ROWS + 20)
    tight = b.tightest_node.name
    assert any(line.split()[:1] == [tight] for line in text.splitlines())   # marked rows show, even mid-chain


def test_ten_thousand_stage_spec_is_read_and_stays_finite(spec_file):
    """4 999 sections (9 999 stages, the source makes the 10 000 of the stage limit),
    written out plainly (about 50 000 values, well past the 100 000 values aliases may
    stand for once the mappings count): the bounded reader reads it, and gains, noise,
    SNR and ENOB are numbers; the gain at the lowest point, where the plain product
    does not overflow, equals it to 1e-12."""
    from chainplan.spec.loader import load_chain
    chain = load_chain(spec_file(ladder(4999, points=10)))
    assert len(chain.stages) == 9999
    ev = evaluate(chain)
    h = ev.ac.node_h[ev.output]
    assert np.all(np.isfinite(h)) and ev.ac.row_exp
    with np.errstate(all="ignore"):
        gains, _, _, _ = reference_ac(chain, ev.params, ev.dc.ops, ev.f_hz[:2])
    ref = gains[ev.output]
    assert np.all(np.isfinite(ref[:, :1])) and _rel(h[:, :1], ref[:, :1]) < 1e-12
    nr = analyse_noise(ev, powers_only=True)
    for x in (nr.out_vrms, nr.in_vrms, nr.snr_db, nr.enob_bits):
        assert np.all(np.isfinite(x))


def test_loops_of_a_long_chain_share_one_refinement_pass(monkeypatch):
    """Every op-amp's crossover and phase margin refined in shared passes (brackets side
    by side, repeated brackets once, split by the memory bound) equal a separate local
    pass per stage, the straightforward way; and a follower of a 1 GHz op-amp driving
    the next RC section crosses over near its GBW with about 90° (a single-pole loop,
    common practice)."""
    from chainplan.engine import loop
    chain = chain_from(ladder(30, points=40))
    ev = evaluate(chain)
    shared = loop.analyse_loops(ev)
    monkeypatch.setattr(loop, "LOCAL_PASS_BYTES", 1.0)          # one bracket per pass
    one_each = loop.analyse_loops(ev)
    monkeypatch.setattr(loop, "_shared_local_ac", lambda ev, brackets: (
        [loop._local_ac(ev, b) for b in brackets], [(i, slice(None)) for i in range(len(brackets))]))
    separate = loop.analyse_loops(ev)
    assert len(shared) == 30
    for a, b, c in zip(shared, one_each, separate):
        for x in (a, b):
            assert _rel(x.f_cross_hz, c.f_cross_hz) < 1e-12 and _rel(x.pm_deg, c.pm_deg) < 1e-12
        assert 0.5e9 < float(c.f_cross_hz[0]) < 1.1e9 and 80 < float(c.pm_deg[0]) <= 90.5
