"""Loading the console script and each command module imports none of the heavy libraries.

Each check runs in a fresh interpreter (``python -c``) and reads ``sys.modules``, so the result
does not depend on what this test process already imported. Heavy imports belong inside the
functions that need them; ``fewshot --help`` and ``--version`` then start about as fast as typer.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

# numpy too: not heavy by itself, but 70 ms of a 200 ms start-up (it came in once through the draw
# code, which the draw and study commands had imported at their top)
HEAVY = ("pandas", "scipy", "sqlalchemy", "alembic", "matplotlib", "sklearn", "numpy")

_PROBE = """
import json, sys
{body}
print(json.dumps(sorted(h for h in {heavy!r} if h in sys.modules)))
"""

# Every module of the command line by name (found on disk, so a new one is checked too), so a
# module that starts importing a heavy library at its top level fails here by name.
# stats_progress is imported only inside the analysis commands (it wires the statistics'
# progress to a bar, so it loads the statistics) and __main__ runs the app.
CLI = Path(__file__).resolve().parent.parent / "fewshot" / "cli"
COMMAND_MODULES = sorted(
    f"fewshot.cli.{p.stem}"
    for p in CLI.glob("*.py")
    if p.stem not in ("__init__", "__main__", "stats_progress")
)


def _heavy_after(body: str) -> list[str]:
    code = _PROBE.format(body=body, heavy=HEAVY)
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=False
    )
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("module", COMMAND_MODULES)
def test_command_module_imports_no_heavy_library(module):
    assert _heavy_after(f"import {module}") == []


def test_console_script_entry_point_is_light():
    # What the installed ``fewshot`` script does before it runs: load ``fewshot.cli:main``.
    body = (
        "from importlib.metadata import entry_points\n"
        "(ep,) = [e for e in entry_points(group='console_scripts') if e.name == 'fewshot']\n"
        "assert ep.value == 'fewshot.cli:main', ep.value\n"
        "ep.load()"
    )
    assert _heavy_after(body) == []


@pytest.mark.parametrize("argv", [["--help"], ["--version"]])
def test_help_and_version_load_no_heavy_library(argv):
    body = (
        "from fewshot.cli import main\n"
        f"sys.argv = ['fewshot', *{argv!r}]\n"
        "try:\n"
        "    main()\n"
        "except SystemExit as exc:\n"
        "    assert exc.code in (0, None), exc.code"
    )
    assert _heavy_after(body) == []


def test_library_import_is_light():
    # ``import fewshot`` and the names a trainer uses first load lazily.
    assert _heavy_after("import fewshot, fewshot.writer, fewshot.errors") == []
