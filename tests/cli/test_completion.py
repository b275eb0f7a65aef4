"""Shell completion (click's ``_BLOTTER_COMPLETE``) answers without loading the valuation stack."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

HEAVY = ("numpy", "scipy", "numba", "textual", "openpyxl")
"""Packages a TAB must not wait for: each costs tens to hundreds of milliseconds to import."""

PROBE = """
import json, sys
from blotter.cli import main
try:
    main(prog_name="blotter")
except SystemExit:
    pass
print(json.dumps(sorted(m for m in {heavy!r} if m in sys.modules)), file=sys.stderr)
"""


@pytest.mark.parametrize(
    ("words", "cword", "expected"),
    [
        ("blotter tr", "1", "plain,trade"),
        ("blotter trade im", "2", "plain,import"),
        ("blotter risk --v", "2", "plain,--vega-unit"),
        ("blotter bench --only e", "3", "plain,engine"),
        ("blotter underlying add X --kind s", "5", "plain,stock"),
    ],
)
def test_a_completion_run_completes_without_numpy(words: str, cword: str, expected: str) -> None:
    env = dict(os.environ, _BLOTTER_COMPLETE="bash_complete", COMP_WORDS=words, COMP_CWORD=cword)
    r = subprocess.run(
        [sys.executable, "-c", PROBE.format(heavy=HEAVY)],
        env=env, capture_output=True, text=True, timeout=60, check=True,
    )
    assert expected in r.stdout.splitlines()
    assert json.loads(r.stderr.strip().splitlines()[-1]) == []


def test_the_readme_s_completion_lines_give_a_script_for_each_shell() -> None:
    readme = (Path(__file__).parents[2] / "README.md").read_text()
    shells = re.findall(r"_BLOTTER_COMPLETE=(\w+)_source blotter", readme)
    assert sorted(shells) == ["bash", "fish", "zsh"]
    here = Path(sys.executable).with_name("blotter")
    command = str(here) if here.exists() else shutil.which("blotter")
    if not command:
        pytest.skip("the blotter command is not installed")
    for shell in shells:
        env = dict(os.environ, _BLOTTER_COMPLETE=f"{shell}_source")
        r = subprocess.run(  # the installed command: click names the variable after it
            [command], env=env, capture_output=True,
            text=True, timeout=60, check=True,
        )
        assert "_blotter_completion" in r.stdout and f"{shell}_complete" in r.stdout
