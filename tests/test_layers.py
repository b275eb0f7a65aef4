"""The layers keep their dependencies pointing down (DESIGN.md): the core never reaches the UI."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize(
    "module", ["blotter.engine", "blotter.store", "blotter.cli", "blotter.risk", "blotter.scenario"]
)
def test_core_and_cli_import_without_textual(module: str) -> None:
    code = (
        "import importlib, sys\n"
        f"importlib.import_module({module!r})\n"
        "bad = sorted(m for m in sys.modules if m == 'textual' or m.startswith('textual.')"
        " or m.startswith('blotter.ui'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"importing {module} loaded {out.stdout.strip()}"


def test_engine_imports_only_numpy_and_scipy() -> None:
    code = (
        "import sys; before = set(sys.modules)\n"
        "import blotter.engine\n"
        "new = {m.split('.')[0] for m in set(sys.modules) - before}\n"
        "bad = sorted(new & {'sqlite3', 'sqlite_utils', 'click', 'rich', 'textual',"
        " 'datetime_tz'})\n"
        "bad += sorted(m for m in sys.modules if m.startswith('blotter.') and not"
        " m.startswith('blotter.engine'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_import_contracts_hold() -> None:
    """import-linter's contracts in pyproject.toml (the static check of the same rule)."""
    pytest.importorskip("importlinter")
    lint = Path(sys.executable).with_name("lint-imports")
    if not lint.exists():
        pytest.skip("lint-imports is not installed beside this interpreter")
    out = subprocess.run([str(lint), str(ROOT / "pyproject.toml")], cwd=ROOT,
                         capture_output=True, text=True)
    assert out.returncode == 0, out.stdout + out.stderr
