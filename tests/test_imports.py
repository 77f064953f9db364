"""Import hygiene: `import zeckenum` and `zeckenum --version` load no heavy dependency.

Each check runs a fresh interpreter (subprocess) and reads its `sys.modules`, so modules
the test process already imported cannot hide a regression.  Common practice: a command
line's start-up should not pay for libraries the command does not use.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

HEAVY = ("dask", "distributed", "matplotlib", "numba")
"""Top-level packages neither path may import (numba: the engines' compiler)."""

PROBE = """
import json, sys
{body}
print(json.dumps(sorted({{m.split(".")[0] for m in sys.modules}} & set({heavy!r}))))
"""


def loaded_heavy(body: str) -> list[str]:
    code = PROBE.format(body=body, heavy=HEAVY)
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         timeout=120, check=False)
    assert res.returncode == 0, res.stderr
    return json.loads(res.stdout.strip().splitlines()[-1])


def test_import_zeckenum_loads_no_heavy_dependency() -> None:
    assert loaded_heavy("import zeckenum") == []


def test_version_loads_no_heavy_dependency() -> None:
    body = """
import contextlib, io
from zeckenum.cli import main
out = io.StringIO()
with contextlib.redirect_stdout(out):
    try:
        main(["--version"])
    except SystemExit as exc:
        assert exc.code in (0, None), exc.code
assert out.getvalue().startswith("zeckenum, version "), out.getvalue()
"""
    assert loaded_heavy(body) == []


@pytest.mark.parametrize("name", ["count", "random_play", "solve", "games", "move_stats",
                                  "build_table", "verify_table", "CountResult", "RunData"])
def test_public_names_load_on_first_use(name: str) -> None:
    """A public name resolves lazily, and only then loads the engines it needs (never
    matplotlib or Dask for a job that does not draw or distribute)."""
    heavy = loaded_heavy(f"import zeckenum\nzeckenum.{name}")
    assert "matplotlib" not in heavy and "dask" not in heavy and "distributed" not in heavy


def test_every_lazy_command_resolves_to_its_name() -> None:
    """Each entry of the group's lazy table imports a click command of that name (a typo
    in a module path would otherwise surface only when a user runs the command)."""
    import click
    from zeckenum.cli.group import LAZY, main

    ctx = click.Context(main)
    assert main.list_commands(ctx) == sorted(LAZY)
    for name in LAZY:
        cmd = main.get_command(ctx, name)
        assert isinstance(cmd, click.Command) and cmd.name == name, name
