"""Shared machinery of every stage kind: field declarations, two-port section
algebra, and the affine DC-state algebra.

Conventions
-----------
* Small-signal two-ports use ABCD (chain) parameters, ``V1 = A·V2 + B·I2``,
  ``I1 = C·V2 + D·I2`` with ``I2`` leaving port 2 (two-port network theory as in
  Pozar, *Microwave Engineering*, ch. 4, from memory).  A stage returns the four
  parameters as separate complex arrays broadcastable to ``(samples, freqs)``.
* Parameter values in ``p`` are floats or ``(samples, 1)`` arrays, so the same
  code runs one nominal analysis or a Monte Carlo batch.
* DC uses an affine "source relation" ``e = a·V + b·I`` at a node, where ``I``
  is the current drawn out of the node by what it drives; ``a, b, e`` are real.
  An ideal voltage source is ``(e=V, a=1, b=0)``, an open circuit ``(0, 0, 1)``.
  Everything stays finite: no magic large numbers for infinite impedances.
* A DC load at a node is ``I = G·V − I0`` (a Norton equivalent).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, NamedTuple

import numpy as np

from ..constants import K_BOLTZMANN, Q_ELECTRON  # noqa: F401  (re-exported for the stages)



#: Physically meaningful magnitudes per unit id (SI): ``(tiny, big, signed)``.  A value
#: of a field in that unit is either exactly 0 or has a magnitude from ``tiny`` to
#: ``big``; ``signed`` says whether negative values mean something.  The ranges are
#: generous (far beyond any part on a readout board) yet keep every product and
#: square the models form inside float64: 1e-308 Hz or 1e308 m would otherwise
#: overflow or divide by zero deep in the analysis.  A unit not listed gets
#: ``DEFAULT_RANGE``.  A field narrows its range with ``minimum``/``maximum``/``tiny``.
UNIT_RANGES: dict[str, tuple[float, float, bool]] = {
    "ohm": (1e-6, 1e15, False),        # 1 µΩ to 1000 TΩ (insulation, electrometer inputs)
    "F": (1e-18, 1.0, False),          # 1 aF to 1 F
    "H": (1e-12, 1e3, False),          # 1 pH to 1 kH
    "V": (1e-15, 1e5, True),           # 1 fV to 100 kV
    "A": (1e-24, 1e3, True),           # saturation currents reach 1e-20 A
    "W": (1e-15, 1e6, False),
    "S": (1e-15, 1e6, False),
    "Hz": (1e-6, 1e15, False),         # 1 µHz to 1 PHz (an "ideal" op-amp's gbw)
    "s": (1e-15, 1e6, False),
    "V/rtHz": (1e-15, 1e-3, False),    # 1 fV/√Hz to 1 mV/√Hz
    "A/rtHz": (1e-21, 1e-3, False),
    "dB": (1e-6, 400.0, True),
    "%": (1e-12, 10.0, True),          # fractions: up to 1000 %
    "ppm": (1e-12, 10.0, True),
    "m": (1e-6, 1e6, False),           # 1 µm to 1000 km
    "F/m": (1e-15, 1e-6, False),
    "ohm/m": (1e-9, 1e9, False),
    "K": (1e-3, 1e4, False),
    "A/V2": (1e-12, 1e3, False),
    "sqrtV": (1e-9, 100.0, False),
    "1/V": (1e-9, 100.0, False),
    "deg": (1e-9, 3600.0, True),
    "1": (1e-12, 1e12, True),
    "dK": (1e-6, 1e4, True),           # temperature differences
    "V/K": (1e-15, 1.0, True),         # voltage drifts
    "ppm/K": (1e-15, 1.0, True),       # relative drifts (fractions per kelvin: up to 100 %/K)
}
DEFAULT_RANGE = (1e-30, 1e30, True)


@dataclass(frozen=True)
class Field:
    """One parameter of a stage kind, as written in a chain spec."""

    unit: str                      # unit id for chainplan.spec.units, or 'choice'
    doc: str
    required: bool = False
    default: Any = None            # spec-style string ("0 V", "vdd", "inf"), or None = absent
    rail_ok: bool = False          # a voltage that may name a declared rail
    choices: tuple[str, ...] = ()  # for unit == 'choice', or extra words a voltage field accepts
    minimum: float | None = None   # inclusive lower bound (SI)
    positive: bool = False         # strictly > 0
    allow_inf: bool = False        # 'inf' accepted
    neg_inf: bool = False          # '-inf' accepted (an op-amp's v_neg: no negative rail)
    tolerable: bool = True         # may carry a ±tolerance
    maximum: float | None = None   # inclusive upper bound (SI); default: the unit's (UNIT_RANGES)
    tiny: float | None = None      # smallest non-zero magnitude; default: the unit's

    def bounds(self) -> tuple[float, float, float]:
        """``(low, high, tiny)``: the accepted values are ``low ≤ v ≤ high`` and
        ``v == 0 or |v| ≥ tiny`` (plus ``inf`` where ``allow_inf``).  Taken from the
        field's own ``minimum``/``maximum``/``positive`` and the unit's range."""
        u_tiny, big, signed = UNIT_RANGES.get(self.unit, DEFAULT_RANGE)
        tiny = u_tiny if self.tiny is None else self.tiny
        if self.minimum is not None:
            low = self.minimum
        elif self.positive:
            low = tiny
        else:
            low = -big if signed else 0.0
        if self.positive:
            low = max(low, tiny)
        high = big if self.maximum is None else self.maximum
        return low, high, tiny

    def out_of_range(self, v):
        """Per value (arrays too): True where ``v`` lies outside :meth:`bounds` or is
        not finite (``inf`` is fine where ``allow_inf``)."""
        low, high, tiny = self.bounds()
        v = np.asarray(v, dtype=float)
        with np.errstate(invalid="ignore"):
            inf_ok = np.isinf(v) & (((v > 0) & self.allow_inf) | ((v < 0) & self.neg_inf))
            bad = ~np.isfinite(v) | (v < low) | (v > high) | ((v != 0) & (np.abs(v) < tiny))
        return bad & ~inf_ok

    def describe_range(self, fmt) -> str:
        """The accepted range in words, e.g. '0 or 1 µΩ to 1e+15 Ω' or '0 or ±(1 fV to 100 kV)';
        ``fmt(value)`` formats a value with its unit."""
        low, high, tiny = self.bounds()
        if low >= 0:
            return ("0 or " if low <= 0 else "") + f"{fmt(max(low, tiny))} to {fmt(high)}"
        if low == -high:
            return f"0 or ±({fmt(tiny)} to {fmt(high)})"
        return f"{fmt(low)} to {fmt(high)} (0 or at least {fmt(tiny)} in magnitude)"


class ABCD(NamedTuple):
    A: Any
    B: Any
    C: Any
    D: Any


class DcState(NamedTuple):
    """Affine source relation at a node: ``e = a·V + b·I`` (I drawn from the node)."""

    e: Any
    a: Any
    b: Any


class DcLoad(NamedTuple):
    """DC load a node sees: current drawn ``I = G·V − I0``."""

    G: Any
    I0: Any


NO_LOAD = DcLoad(0.0, 0.0)


def series_z(z) -> ABCD:
    """Series impedance two-port ``[[1, Z], [0, 1]]`` (Pozar, table 4.1, from memory)."""
    return ABCD(1.0, z, 0.0, 1.0)


def shunt_y(y) -> ABCD:
    """Shunt admittance two-port ``[[1, 0], [Y, 1]]`` (Pozar, table 4.1, from memory)."""
    return ABCD(1.0, 0.0, y, 1.0)


def chain(m1: ABCD, m2: ABCD) -> ABCD:
    """Cascade of two two-ports: the matrix product ``M1·M2`` written out by hand,
    skipping the products with the plain 0 and 1 of series and shunt sections
    (whole-array operations saved in tolerance runs; the values are identical)."""
    return ABCD(
        _add(_mul(m1.A, m2.A), _mul(m1.B, m2.C)),
        _add(_mul(m1.A, m2.B), _mul(m1.B, m2.D)),
        _add(_mul(m1.C, m2.A), _mul(m1.D, m2.C)),
        _add(_mul(m1.C, m2.B), _mul(m1.D, m2.D)),
    )


def _plain(x, v) -> bool:
    return type(x) in (float, int) and x == v


def _mul(x, y):
    if _plain(x, 1.0):
        return y
    if _plain(y, 1.0):
        return x
    if _plain(x, 0.0) or _plain(y, 0.0):
        return 0.0
    return x * y


def _add(x, y):
    if _plain(x, 0.0):
        return y
    if _plain(y, 0.0):
        return x
    return x + y


def unilateral(y_in, inv_av, z_out) -> ABCD:
    """Unilateral amplifier with input admittance Yin, open-circuit gain Av and
    output impedance Zout: ``A = 1/Av, B = Zout/Av, C = Yin/Av, D = Yin·Zout/Av``
    (derived from V2 = Av·V1 − Zout·I2 and I1 = Yin·V1).  Takes ``1/Av`` so an
    ideal stage never divides by zero."""
    return ABCD(inv_av, z_out * inv_av, y_in * inv_av, y_in * z_out * inv_av)


def follower(y_series, gm, g_out, y_in_shunt=0.0) -> ABCD:
    """Follower two-port (source or emitter follower, hybrid-π small-signal model):
    admittance ``y`` between input and output terminals (1/rπ or sCgs), a
    transconductance ``gm·(V1 − V2)`` into the output node, a shunt admittance
    ``G`` at the output (1/ro, bias resistor, gmb), and optionally a shunt
    admittance at the input (sCgd).  Solving the two node equations gives
    ``A = 1 + G/(y+gm)``, ``B = 1/(y+gm)``, ``C = y·G/(y+gm)``, ``D = y/(y+gm)``
    (Sedra & Smith, *Microelectronic Circuits*, follower analysis, from memory;
    with y = 1/rπ it reproduces Rin = rπ + (β+1)R)."""
    k = 1.0 / (y_series + gm)
    m = ABCD(1.0 + g_out * k, k, y_series * g_out * k, y_series * k)
    if np.any(np.asarray(y_in_shunt) != 0):
        m = chain(shunt_y(y_in_shunt), m)
    return m


def at_temperature(tempcos: dict | None, p: dict) -> dict:
    """Fields with a temperature coefficient moved to ``p['temp_k']`` from ``p['t_nom_k']``:
    the linear law of a data sheet's coefficient, ``x(T) = x0·(1 + tc·(T − Tnom))``
    (relative, ppm/K) or ``x0 + tc·(T − Tnom)`` (absolute, e.g. mV/K); a resistor's
    R(T) = R0·(1 + α·ΔT) (any electrical-engineering handbook, from memory).  A unit's
    own coefficient, drawn in a tolerance run, is ``p['FIELD@tc']``."""
    if not tempcos:
        return p
    dt = p.get("temp_k", 300.0) - p.get("t_nom_k", 300.0)
    q = dict(p)
    for fld, tc in tempcos.items():
        c = p.get(f"{fld}@tc", tc.value)
        q[fld] = p[fld] * (1.0 + c * dt) if tc.rel is not None else p[fld] + c * dt
    return q


# --- DC algebra -----------------------------------------------------------

def dc_series_r(st: DcState, r) -> DcState:
    """Through a series resistor: V_in = V + R·I, so e = a·V + (a·R + b)·I."""
    return DcState(st.e, st.a, st.a * r + st.b)


def dc_shunt_r(st: DcState, r, v_ref) -> DcState:
    """A resistor from the node to v_ref draws (V − v_ref)/R."""
    g = _inv(r)
    return DcState(st.e + st.b * v_ref * g, st.a + st.b * g, st.b)


def dc_open() -> DcState:
    """A series capacitor at DC: the far side sees an open circuit."""
    return DcState(0.0, 0.0, 1.0)


def dc_source(v, r_out) -> DcState:
    """A Thevenin source: e = V + R·I."""
    return DcState(v, 1.0, r_out)


def dc_node_voltage(st: DcState, load: DcLoad):
    """Solve e = a·V + b·(G·V − I0) for the node voltage (nan for a floating node)."""
    den = np.asarray(st.a + st.b * load.G, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        v = (st.e + st.b * load.I0) / den
    return np.where(den == 0, np.nan, v)


def dc_with_sibling(st: DcState, sib: DcLoad) -> DcState:
    """Absorb sibling loads at a fan-out node into the source relation seen by one branch."""
    return DcState(st.e + st.b * sib.I0, st.a + st.b * sib.G, st.b)


def dc_load_series_r(load: DcLoad, r) -> DcLoad:
    """Looking into a series resistor that feeds ``load``: I = G·V/(1+R·G) − I0/(1+R·G)."""
    k = 1.0 / (1.0 + r * load.G)
    return DcLoad(load.G * k, load.I0 * k)


def dc_load_shunt_r(load: DcLoad, r, v_ref) -> DcLoad:
    g = _inv(r)
    return DcLoad(load.G + g, load.I0 + v_ref * g)


def _inv(x):
    """1/x with 1/inf = 0 (exact for infinite resistances).  IEEE division already
    gives 1/±inf = ±0 for real x and for complex x with a finite imaginary part
    (every admittance here: an infinite conductance plus a finite susceptance), so
    only a complex x with an infinite or undefined imaginary part takes the extra
    pass that replaces its quotient by 0."""
    x = np.asarray(x)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = 1.0 / x
    if x.dtype.kind == "c" and not np.isfinite(x.imag).all():
        r = np.where(np.isinf(x), 0.0, r)
    return r if r.ndim else np.asarray(r)


def parallel(*zs):
    """Parallel combination of impedances, exact for infinite members."""
    return _inv(sum(_inv(z) for z in zs))


inv = _inv


@dataclass
class Op:
    """Operating point of a stage: DC levels, device small-signal values and the
    allowed input/output voltage ranges.  ``values`` is shown in reports."""

    values: dict[str, Any] = field(default_factory=dict)
    in_range: tuple[Any, Any] = (-np.inf, np.inf)
    out_range: tuple[Any, Any] = (-np.inf, np.inf)
    input_load: DcLoad = NO_LOAD           # DC current the stage input draws
    problems: list[str] = field(default_factory=list)   # e.g. "out of saturation"
    bad: Any = False                       # per-sample mask: the device cannot hold this bias
    no_rail: tuple[bool, bool] = (False, False)   # (low, high) sides declared without a supply rail

    def flag(self, mask, fld: str, message: str) -> bool:
        """Record a bias the device cannot hold: OR the per-sample ``mask`` into
        ``bad`` (tolerance runs count those samples as failures) and, if any
        sample is affected, add ``(field, message)`` to ``problems``."""
        mask = np.asarray(mask, dtype=bool)
        self.bad = self.bad | mask
        if mask.any():
            self.problems.append((fld, message))
        return bool(mask.any())


class StageKind:
    """Base class of a stage kind.  Subclasses declare FIELDS and implement the
    small-signal two-port (``abcd``), the DC behaviour, and the noise sources."""

    kind: str = ""
    title: str = ""
    role: str = "two_port"          # 'source', 'two_port' or 'load'
    follower_type: bool = False     # usable as a buffer candidate
    draws_input_current: bool = False   # DC input current depends on the operating point (base current)
    #: what the input takes from its source: 'voltage' (it reads a node's voltage), or 'current' /
    #: 'charge' — a virtual ground that the stage's feedback holds near a fixed level on purpose,
    #: taking the source's current (a transimpedance amplifier) or charge (a charge amplifier).
    #: There the budget reports the current or charge transfer, not a loading loss, and the
    #: loading requirements and the buffer advice and placement leave the interface alone.
    input_mode: str = "voltage"
    FIELDS: dict[str, Field] = {}
    #: groups of alternatives of which exactly one must be given; an alternative is a field
    #: name or a tuple of names given together (``("w_over_l", ("w", "l"))``)
    ONE_OF: tuple[tuple, ...] = ()
    #: the noise data a user gives (densities, 1/f corners) whose zero means "not given"; an
    #: item may be a tuple of alternatives, any one of which gives that noise (("flicker_corner", "kf"))
    NOISE_DATA: tuple = ()
    #: the kind's device physics makes noise of its own whatever its data (channel, shot noise)
    intrinsic_noise: bool = False

    # -- small signal --------------------------------------------------
    def abcd(self, p: dict, s, op: Op) -> ABCD:  # pragma: no cover - abstract
        raise NotImplementedError

    def load_admittance(self, p: dict, s, op: Op):
        """Loads only: the input admittance."""
        raise NotImplementedError

    def input_shunt(self, p: dict, s):
        """Virtual-ground inputs: the part of the input admittance whose current does not reach
        the feedback network (the op-amp's own input shunt 1/r_in + s·c_in at the − input)."""
        return 0.0

    # -- DC --------------------------------------------------------------
    def dc_input_load(self, p: dict, out_load: DcLoad, op: Op | None) -> DcLoad:
        """DC load presented at the input, given the DC load at the output."""
        return NO_LOAD

    def dc_forward(self, p: dict, st_in: DcState, v_in, out_load: DcLoad) -> tuple[DcState, Op]:
        """Source relation at the output and the operating point."""
        raise NotImplementedError

    def notes(self, p: dict) -> list[str]:
        """Where the model leaves its validity or something is assumed, in words (the budget's notes)."""
        return []

    # -- noise -------------------------------------------------------------
    def noise(self, p: dict, s, op: Op, temp_k) -> list:
        """Noise sources of this stage (see chainplan.engine.noise)."""
        return []

    # -- spec checks and nominal references ----------------------------------
    def spec_problems(self, p: dict) -> list:
        """(field, message) for fields that do not go together, at spec time (nominal values)."""
        return []

    def wants_reference(self, p: dict) -> bool:
        """True when a study's evaluation needs values of the nominal operating point
        (:meth:`nominal_reference`; e.g. a MOSFET's flicker corner, stated at the nominal bias)."""
        return False

    def nominal_reference(self, p: dict, op: Op) -> dict:
        """Extra parameters taken from the nominal operating point ``op`` (see :meth:`wants_reference`)."""
        return {}

    # -- noise data (the buffer advice marks a candidate without it) -------------
    def noise_fields_used(self, p: dict) -> list[tuple]:
        """The NOISE_DATA items (each a tuple of alternative fields) that apply to these
        parameters: ``<x>_noise`` only when ``x`` is given (a sink's noise needs the sink)."""
        items = [(f,) if isinstance(f, str) else tuple(f) for f in self.NOISE_DATA]
        return [alt for alt in items
                if all(f in self.FIELDS for f in alt)
                and not any(f.endswith("_noise") and f[:-6] in self.FIELDS and p.get(f[:-6]) is None for f in alt)]

    def noise_gaps(self, p: dict) -> list[str]:
        """The applicable noise data left at zero (every alternative of it): noise this stage's
        figures leave out, named as written ('flicker_corner or kf')."""
        given = lambda f: np.any(np.asarray(p.get(f, 0.0), dtype=float) > 0)  # noqa: E731
        return [" or ".join(alt) for alt in self.noise_fields_used(p) if not any(given(f) for f in alt)]

    def has_noise_data(self, p: dict) -> bool:
        """False when the stage would be noiseless only because no noise data was given."""
        used = self.noise_fields_used(p)
        return self.intrinsic_noise or not used or len(self.noise_gaps(p)) < len(used)


Check = Callable[[dict], str | None]


def alternative_fields(alt) -> tuple[str, ...]:
    """The field names of one ``ONE_OF`` alternative (a name or a tuple of names)."""
    return (alt,) if isinstance(alt, str) else tuple(alt)


def alternative_text(alt, quote: str = "") -> str:
    """An alternative in words: ``w_over_l`` or ``w and l``."""
    return " and ".join(f"{quote}{n}{quote}" for n in alternative_fields(alt))
