"""Run ngspice in batch mode (``ngspice -b``) on a netlist and read the results.

The reference simulator for tests.  A *netlist* here is the circuit part only:
element lines and ``.model`` cards, no title, no ``.control`` block and no
``.end`` (this module adds them).  Node names are returned in lower case, as
ngspice reports them.

    run_op(netlist)                          -> {node: volts, 'vx#branch': amps, ...}
    run_ac(netlist, node, freqs)             -> complex V(node) at each frequency
    run_noise(netlist, node, source, freqs)  -> (output, input-referred) noise, V/√Hz

Every frequency is simulated exactly (one ``ac lin 1 f f`` / ``noise ... lin 1 f f``
per point), so no interpolation enters the comparison.  Failures raise
:class:`NgspiceError` with the simulator's log.
"""
from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pytest

NGSPICE = shutil.which("ngspice")

#: Mark for tests that need the simulator (CI installs it, so they run there).
needs_ngspice = pytest.mark.skipif(NGSPICE is None, reason="ngspice is not installed (apt-get install ngspice)")

_VALUE_RE = re.compile(r"^\s*(\S+)\s+=\s+([-+0-9.eE]+)\s*$")
_TAG = "CPTAG"


class NgspiceError(RuntimeError):
    """ngspice failed or did not print what was asked for."""


def run(netlist: str, control: list[str], timeout_s: float = 60.0) -> str:
    """Run ``netlist`` with the given ``.control`` lines; return ngspice's stdout."""
    if NGSPICE is None:
        raise NgspiceError("ngspice is not installed")
    low = netlist.lower()
    if ".control" in low or re.search(r"^\s*\.end\s*$", low, re.M):
        raise NgspiceError("give the circuit lines only; run() adds .control and .end")
    text = "\n".join(["* chainplan reference netlist", netlist.strip(), ".control", "set numdgt=12",
                      *control, "quit 0", ".endc", ".end", ""])
    with tempfile.TemporaryDirectory(prefix="chainplan-ngspice-") as tmp:
        path = Path(tmp) / "ref.cir"
        path.write_text(text, encoding="utf-8")
        proc = subprocess.run([NGSPICE, "-b", str(path)], capture_output=True, text=True, cwd=tmp,
                              timeout=timeout_s)
    if proc.returncode != 0:
        raise NgspiceError(f"ngspice exited {proc.returncode}:\n{proc.stdout}\n{proc.stderr}\n--- netlist\n{text}")
    return proc.stdout + "\n" + proc.stderr


def _num(x) -> str:
    """A number as ngspice reads it, at full double precision."""
    return format(float(x), ".17g")


def _values(out: str) -> dict[str, list[float]]:
    """Every 'name = value' line, grouped by name in order of appearance."""
    vals: dict[str, list[float]] = {}
    for line in out.splitlines():
        m = _VALUE_RE.match(line)
        if m:
            vals.setdefault(m.group(1).lower(), []).append(float(m.group(2)))
    return vals


def _need(vals, name, count, out):
    got = vals.get(name, [])
    if len(got) != count:
        raise NgspiceError(f"expected {count} value(s) of {name}, got {len(got)}:\n{out}")
    return np.array(got)


def run_op(netlist: str, extra: tuple[str, ...] = ()) -> dict[str, float]:
    """Operating point: every node voltage and source branch current, plus any
    ``extra`` vectors such as ``'@m1[gm]'`` (device small-signal values)."""
    control = ["op", "print all"] + [f"print {e}" for e in extra]
    out = run(netlist, control)
    vals = _values(out)
    res = {k: v[0] for k, v in vals.items()}
    for e in extra:
        if e.lower() not in res:
            raise NgspiceError(f"ngspice printed no value for {e}:\n{out}")
    if not res:
        raise NgspiceError(f"no operating point printed:\n{out}")
    return res


def run_ac(netlist: str, node: str, freqs, ref: str = "0") -> np.ndarray:
    """Complex AC voltage V(node) − V(ref) at each frequency (sources carry 'ac' magnitudes)."""
    freqs = np.atleast_1d(np.asarray(freqs, dtype=float))
    expr = f"v({node})" if ref == "0" else f"v({node},{ref})"
    control = []
    for f in map(_num, freqs):
        control += [f"ac lin 1 {f} {f}", f"let {_TAG}re = real({expr})", f"let {_TAG}im = imag({expr})",
                     f"print {_TAG}re {_TAG}im"]
    out = run(netlist, control)
    vals = _values(out)
    re_ = _need(vals, f"{_TAG.lower()}re", len(freqs), out)
    im_ = _need(vals, f"{_TAG.lower()}im", len(freqs), out)
    return re_ + 1j * im_


def run_noise(netlist: str, node: str, source: str, freqs, ref: str = "0") -> tuple[np.ndarray, np.ndarray]:
    """Noise densities at each frequency: (output noise at V(node, ref), noise
    referred to the input source ``source``), both in V/√Hz (A/√Hz for a current source)."""
    freqs = np.atleast_1d(np.asarray(freqs, dtype=float))
    out_expr = f"v({node})" if ref == "0" else f"v({node},{ref})"
    control = []
    for f in map(_num, freqs):
        control += [f"noise {out_expr} {source} lin 1 {f} {f}", "print onoise_spectrum inoise_spectrum"]
    out = run(netlist, control)
    vals = _values(out)
    return (_need(vals, "onoise_spectrum", len(freqs), out), _need(vals, "inoise_spectrum", len(freqs), out))
