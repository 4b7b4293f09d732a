"""Command line: ``chainplan <command> ...``.  A thin layer over the Python API;
each command lives in chainplan/commands/<name>.py with ``add_arguments`` and
``run``.  Exit codes: 0 fine, 1 a requirement failed, 2 bad input."""
from __future__ import annotations

import argparse
import importlib
import os
import sys

from .errors import SpecError, UsageError

#: command name -> (module, one-line help).  Modules import heavy libraries inside run().
COMMANDS = {
    "budget": ("chainplan.commands.budget", "compute and print the budget of a chain"),
    "buffers": ("chainplan.commands.buffers", "where a buffer pays off, what it costs, and the cheapest placement"),
    "noise": ("chainplan.commands.noise", "noise contributors, SNR, dynamic range and ENOB at the converter"),
    "accuracy": ("chainplan.commands.accuracy", "DC error budget: offset, bias current, gain error and drift, "
                 "before and after calibration"),
    "check": ("chainplan.commands.check", "check the requirements of one or more chains (exit 1 if any fails)"),
    "spread": ("chainplan.commands.spread", "tolerance Monte Carlo: distributions, production yield over the "
               "corners, what drives the spread"),
    "temperature": ("chainplan.commands.temperature", "the budget from cold to hot: gain, DC levels, headroom and "
                    "noise at a list of temperatures, with the drift per kelvin"),
    "compare": ("chainplan.commands.compare", "what a change did to the budget: two specs, or one at two git revisions"),
    "plot": ("chainplan.commands.plot", "draw the level diagram, gain, noise and Monte Carlo figures (PNG, SVG)"),
    "report": ("chainplan.commands.report", "write a self-contained HTML review report of a chain"),
    "netlist": ("chainplan.commands.netlist", "export a chain as a SPICE netlist (op, AC and noise analyses)"),
    "schema": ("chainplan.commands.schema", "print the JSON Schema of chain specs (for editors)"),
}


class _Parser(argparse.ArgumentParser):
    def error(self, message):
        self.print_usage(sys.stderr)
        sys.stderr.write(f"chainplan: error: {message}\n")
        raise SystemExit(2)


def build_parser() -> argparse.ArgumentParser:
    from . import __version__
    ap = _Parser(prog="chainplan", description="Signal budgets of sensor readout chains: loading, gain, "
                 "headroom, noise and where a buffer pays off.")
    ap.add_argument("--version", action="version", version=f"chainplan {__version__}")
    sub = ap.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for name, (mod, help_) in COMMANDS.items():
        p = sub.add_parser(name, help=help_, description=help_)
        m = importlib.import_module(mod)
        m.add_arguments(p)
        p.set_defaults(_run=m.run)
    return ap


def main(argv=None) -> int:
    try:
        args = build_parser().parse_args(argv)
        rc = int(args._run(args) or 0)
        sys.stdout.flush()              # surface a full disk or closed pipe here, not at exit
        return rc
    except SpecError as exc:
        sys.stderr.write(f"chainplan: {exc}\n")
        return 2
    except UsageError as exc:
        sys.stderr.write(f"chainplan: error: {exc}\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write("chainplan: interrupted\n")
        return 130
    except BrokenPipeError:
        return 0
    except OSError as exc:              # the machine, not chainplan: full disk, unreadable file
        sys.stderr.write(f"chainplan: error: {exc.strerror or exc}" + (f": '{exc.filename}'" if exc.filename else "")
                         + "\n")
        return 2
    except Exception as exc:  # a bug in chainplan, not in the user's input
        if os.environ.get("CHAINPLAN_DEBUG"):
            raise
        sys.stderr.write(f"chainplan: internal error: {type(exc).__name__}: {exc}\n"
                         "(set CHAINPLAN_DEBUG=1 to see where; please report it with the spec file)\n")
        return 70


if __name__ == "__main__":
    raise SystemExit(main())
