"""Start-up: a command imports only its own module (lazy command modules), and
``import chainplan`` does not pull in the engine until the API is used."""
from __future__ import annotations

import os
import subprocess
import sys

from conftest import DEMO_CHAINS

ROOT = os.path.join(os.path.dirname(__file__), "..")


def _modules(code: str) -> set:
    out = subprocess.run([sys.executable, "-c", code + "\nimport sys\nprint(' '.join(sorted(sys.modules)))"],
                         capture_output=True, text=True, env=dict(os.environ, PYTHONPATH=ROOT), cwd=ROOT, check=True)
    return set(out.stdout.split())


def test_budget_imports_only_its_command():
    mods = _modules(f"from chainplan.cli import main\nmain(['budget', {str(DEMO_CHAINS[0])!r}])")
    commands = {m for m in mods if m.startswith("chainplan.commands.")}
    assert commands == {"chainplan.commands.budget", "chainplan.commands.common"}
    assert not {"matplotlib", "networkx", "chainplan.placement.optimiser", "chainplan.studies.montecarlo"} & mods


def test_help_lists_every_command_without_importing_them():
    from chainplan.cli import COMMANDS
    out = subprocess.run([sys.executable, "-m", "chainplan", "--help"], capture_output=True, text=True,
                         env=dict(os.environ, PYTHONPATH=ROOT), cwd=ROOT)
    assert out.returncode == 0
    assert all(name in out.stdout for name in COMMANDS)
    mods = _modules("from chainplan.cli import build_parser, COMMANDS\n"
                    "build_parser('budget')")
    assert not any(m.startswith("chainplan.commands.") and m not in ("chainplan.commands.budget",
                                                                     "chainplan.commands.common") for m in mods)


def test_import_chainplan_is_light_and_the_api_still_works():
    mods = _modules("import chainplan")
    assert "chainplan.api" not in mods and "numpy" not in mods
    import chainplan
    b = chainplan.budget(chainplan.load(str(DEMO_CHAINS[0])))
    assert b.gain_db == b.gain_db
