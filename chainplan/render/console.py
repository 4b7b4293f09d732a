"""One rich Console for the CLI, plain when piped or when NO_COLOR is set."""
from __future__ import annotations

import os
import sys

from ..spec.numbers import figure, loss


def make_console(file=None, wide: bool = False, width: int | None = None):
    """The console of a command: the terminal's width, or ``COLUMNS`` (default 100)
    when piped; ``width`` fixes it (golden-file tests); ``wide`` (``--wide``) shows
    the secondary columns of every table however wide it gets."""
    from rich.console import Console
    stream = file or sys.stdout
    tty = hasattr(stream, "isatty") and stream.isatty()
    plain = not tty or "NO_COLOR" in os.environ
    if width is None and not tty:
        try:
            width = max(40, int(os.environ.get("COLUMNS", "100")))
        except ValueError:
            width = 100
    console = Console(file=stream, no_color=plain, color_system=None if plain else "auto", width=width,
                      highlight=False, emoji=False, soft_wrap=False, force_terminal=False if not tty else None)
    console.chainplan_wide = wide
    return console


def table_box(console):
    """A rule under the header and no vertical lines: light on a terminal, ASCII when piped."""
    from rich import box
    if console.is_terminal:
        return box.SIMPLE_HEAD
    return box.Box("    \n    \n -- \n    \n    \n -- \n    \n    \n", ascii=True)


def db(x, digits: int = 2) -> str:
    """Signed decibels with a fixed number of decimals (no negative zero)."""
    return figure(x, "dB", decimals=digits)


def eng(x, unit: str, digits: int = 3) -> str:
    """One value in engineering notation (the one formatter: chainplan.spec.numbers)."""
    return figure(x, unit, digits=digits)


def stage_gain(s) -> tuple[str, str]:
    """A stage row's gain and gain in dB: V/V, or Ω and dBΩ for a transimpedance stage."""
    if s.gain is None:
        return "—", db(s.gain_db)
    if s.gain_unit == "Ω":
        return eng(s.gain, "Ω"), db(s.gain_db) + "Ω"
    if s.gain_unit == "V/C":                      # a charge amplifier: the trade's mV/pC
        return figure(s.gain * 1e-12, "V") + "/pC", "—"
    return figure(s.gain, "V/V"), db(s.gain_db)


def end_gain(b, f_ref: str) -> tuple[str, str]:
    """Summary row of the end-to-end figure: a gain in dB, or for a current sensor a
    transimpedance in Ω and dBΩ (20·log10 of |V/I| re 1 Ω)."""
    adc = converter_of(b.chain, b.output)
    where = f"'{adc or b.output}'"         # where the signal ends: the converter, if one reads the output
    if b.gain_unit == "dBΩ":
        return (f"end-to-end transimpedance to {where} at {f_ref}",
                f"{eng(10 ** (b.gain_db / 20), 'Ω')} ({db(b.gain_db)}Ω)")
    return f"end-to-end gain to {where} at {f_ref}", db(b.gain_db)


def converter_of(chain, node: str) -> str | None:
    """The ADC stage reading ``node`` (where the signal ends), if any."""
    for st in chain.stages:
        if st.parent == node and st.kind == "adc":
            return st.name
    return None



#: caption line of an interface table with virtual-ground inputs
TRANSFER_NOTE = ("current/charge transfer: a virtual-ground input (transimpedance or charge amplifier) takes the "
                 "source's current or charge, not its voltage; the share of the source's short-circuit current "
                 "(charge) that reaches the feedback network, not a loading loss")


def interface_cell(r, decimals: int = 3) -> str:
    """An interface's figure: its loading loss (dB lost), or at a virtual-ground input the
    current or charge transfer in % and dB, labelled as such."""
    if r.loading:
        return loss(r.loss_db, decimals)
    if r.transfer is None:
        return f"{r.mode} transfer —"
    return f"{r.mode} transfer {figure(r.transfer, '%', decimals=1)} ({figure(r.transfer_db, 'dB', decimals=2)})"
