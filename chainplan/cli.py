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
    "power": ("chainplan.commands.power", "quiescent current per rail and stage, the power and battery life"),
    "check": ("chainplan.commands.check", "check the requirements of one or more chains (exit 1 if any fails)"),
    "spread": ("chainplan.commands.spread", "tolerance Monte Carlo: distributions, production yield over the "
               "corners, what drives the spread"),
    "rare": ("chainplan.commands.rare", "production failure rate at the ppm level: importance sampling "
             "around the failure regions, the most likely failure point"),
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


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The argument parser.  With ``command`` (the command word of the line being
    run) only that command's module is imported and given its options — start-up
    pays for the command it runs; the others are listed by name and help line.
    Without one, every command is complete (for documentation and tests)."""
    from . import __version__
    ap = _Parser(prog="chainplan", description="Signal budgets of sensor readout chains: loading, gain, "
                 "headroom, noise and where a buffer pays off.")
    ap.add_argument("--version", action="version", version=f"chainplan {__version__}")
    sub = ap.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for name, (mod, help_) in COMMANDS.items():
        p = sub.add_parser(name, help=help_, description=help_)
        if command is None or name == command:
            m = importlib.import_module(mod)
            m.add_arguments(p)
            p.set_defaults(_run=m.run)
    return ap


def command_word(argv) -> str | None:
    """The command a command line names: its first word that is not an option."""
    return next((a for a in argv if not a.startswith("-")), None)


def main(argv=None) -> int:
    import warnings
    from .errors import tidy
    from .spec.yamlsrc import forget_files_read
    # A non-finite figure is an error naming the stage (engine.budget.check_finite); numpy's own
    # floating-point warnings would only add lines with source paths before or instead of it.
    warnings.filterwarnings("ignore", category=RuntimeWarning)
    forget_files_read()                  # the inputs of this run, which no output may replace
    guard = _PipeGuard.install()
    try:
        argv = sys.argv[1:] if argv is None else list(argv)
        word = command_word(argv)
        args = build_parser(word if word in COMMANDS else None).parse_args(argv)
        rc = int(args._run(args) or 0)
        sys.stdout.flush()              # surface a full disk here, not at exit
        return rc
    except SpecError as exc:
        sys.stderr.write(f"chainplan: {exc}\n")
        return 2
    except UsageError as exc:
        sys.stderr.write(f"chainplan: error: {tidy(exc)}\n")
        return 2
    except KeyboardInterrupt as exc:
        sys.stderr.write("chainplan: interrupted\n")
        return 143 if type(exc).__name__ == "Interrupted" else 130
    except BrokenPipeError:             # the reader went away before the verdict was known
        _PipeGuard.silence()
        return 141
    except OSError as exc:              # the machine, not chainplan: full disk, unreadable file
        sys.stderr.write(tidy(f"chainplan: error: {exc.strerror or exc}" + (f": '{exc.filename}'" if exc.filename
                                                                           else "")) + "\n")
        return 2
    except Exception as exc:  # a bug in chainplan, not in the user's input
        if os.environ.get("CHAINPLAN_DEBUG"):
            raise
        sys.stderr.write(tidy(f"chainplan: internal error: {type(exc).__name__}: {exc}") + "\n"
                         "(set CHAINPLAN_DEBUG=1 to see where; please report it with the spec file)\n")
        return 70
    finally:
        if guard is not None:
            guard.uninstall()


class _PipeGuard:
    """Standard output that a closed pipe (``chainplan check to | head -1``) cannot break:
    once the reader is gone, the rest of the output is dropped quietly and the command
    finishes with its own exit code (1 still means a requirement failed)."""

    broken = False

    def __init__(self, stream):
        self._stream = stream

    @classmethod
    def install(cls):
        if isinstance(sys.stdout, cls) or sys.stdout is None:
            return None
        cls.broken = False
        guard = cls(sys.stdout)
        sys.stdout = guard
        return guard

    def uninstall(self):
        if sys.stdout is self:
            sys.stdout = self._stream

    @staticmethod
    def silence():
        """Point the standard output descriptor at /dev/null so the exit's flush stays quiet."""
        _PipeGuard.broken = True
        try:
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, sys.__stdout__.fileno())
            os.close(devnull)
        except (OSError, ValueError, AttributeError):
            pass

    def write(self, text):
        if _PipeGuard.broken:
            return len(text)
        try:
            return self._stream.write(text)
        except BrokenPipeError:
            self.silence()
            return len(text)

    def flush(self):
        if _PipeGuard.broken:
            return None
        try:
            return self._stream.flush()
        except BrokenPipeError:
            self.silence()
            return None

    @property
    def buffer(self):
        inner = getattr(self._stream, "buffer", None)
        return None if inner is None else _PipeGuard(inner)

    def __getattr__(self, name):
        return getattr(self._stream, name)


if __name__ == "__main__":
    raise SystemExit(main())
