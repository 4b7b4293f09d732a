"""``chainplan noise FILE``: noise density at chosen frequencies, integrated noise
at the output and referred to the input, the contributors ranked by share, and
the converter budget (SNR, dynamic range, ENOB)."""
from __future__ import annotations

import math

from .common import _freq, add_wide_option, apply_analysis_options


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML)")
    p.add_argument("--spot", metavar="FREQS",
                   help="spot-noise frequencies of the density table, comma-separated, e.g. '10 Hz,1 kHz,100 kHz' "
                        "(default: f_ref and the decades of the span)")
    p.add_argument("--at", metavar="FREQ", help="reference frequency of the signal and of the input "
                                                 "referral, e.g. '1 kHz' (default: the spec's f_ref)")
    p.add_argument("--span", metavar="LOW:HIGH", help="analysis span, e.g. '1 Hz:10 MHz' (default: the spec's)")
    p.add_argument("--bandwidth", metavar="BAND",
                   help="integrate over a brick-wall band instead of the whole span: 'HIGH' (from the span's "
                        "start) or 'LOW:HIGH', e.g. '20 kHz' or '10 Hz:20 kHz'")
    p.add_argument("--json", action="store_true", help="print JSON instead of tables")
    add_wide_option(p)


def run(args) -> int:
    import numpy as np

    from ..engine.budget import check_operating_points, evaluate
    from ..errors import UsageError
    from ..engine.noise import analyse_noise, density_at, noise_json
    from ..spec.loader import load_chain
    chain = apply_analysis_options(load_chain(args.file), args)
    band = _band(args.bandwidth)
    ev = evaluate(chain)
    check_operating_points(chain, ev.dc)
    try:
        res = analyse_noise(ev, band)
    except ValueError as exc:
        raise UsageError(f"--bandwidth: {exc}") from None
    freqs = _freqs(args.spot) if args.spot else default_freqs(ev.span, chain.analysis.f_ref_hz)
    dens, gain, gens = density_at(ev, freqs, band)
    from ..engine.measurand import figures, measurand
    m = measurand(chain)
    fig = figures(ev, res) if m is not None else None
    if args.json:
        from ..render.json_out import clean, dumps
        from ..spec.safety import safety_notice
        d = {"chain": chain.name, "file": chain.path, "hazards": chain.hazards,
             "caution": safety_notice(chain.hazards), "f_ref_hz": chain.analysis.f_ref_hz,
             "temperature_k": chain.temp_k, "input_unit": chain.source.model.signal_unit, **noise_json(res),
             "density": [{"f_hz": f, "out_v_per_rthz": float(dens[0, i]),
                          "in_v_per_rthz": float(dens[0, i] / gain[0, i]) if gain[0, i] > 0 else None,
                          **({"in_measurand_per_rthz": float(m.of(dens[0, i] / gain[0, i])) if gain[0, i] > 0
                              else None} if m is not None else {})}
                         for i, f in enumerate(np.asarray(freqs, dtype=float))]}
        if fig:
            d["measurand"] = fig
        print(dumps(clean(d)))
    else:
        from ..render.console import make_console
        from ..render.noise_tables import noise_tables
        noise_tables(chain, res, freqs, dens, gain, gens, make_console(wide=args.wide), fig)
    return 0


def default_freqs(span, f_ref: float) -> list:
    """f_ref and the decades inside the span, thinned to at most eight rows."""
    lo, hi = math.ceil(math.log10(span[0]) - 1e-9), math.floor(math.log10(span[-1]) + 1e-9)
    decades = list(range(lo, hi + 1))
    step = max(1, math.ceil(len(decades) / 7))
    return sorted({10.0 ** k for k in decades[::step]} | {float(f_ref)})


def _freqs(text: str) -> list:
    out = [_freq(part, "--spot") for part in text.split(",") if part.strip()]
    if not out:
        from ..errors import UsageError
        raise UsageError("--spot takes comma-separated frequencies, e.g. '10 Hz,1 kHz'")
    return sorted(set(out))


def _band(text):
    if not text:
        return None
    if ":" in text:
        lo, hi = (_freq(x, "--bandwidth") for x in text.split(":", 1))
        if not lo < hi:
            from ..errors import UsageError
            raise UsageError("--bandwidth: the low end must be below the high end")
        return lo, hi
    return _freq(text, "--bandwidth")
