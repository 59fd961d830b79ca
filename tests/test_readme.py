"""The README's two set-up commands are the ones .ci/run runs, exactly as written."""

from __future__ import annotations

import os
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def readme_commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    block = re.search(r"<!-- setup-commands -->\s*```(?:bash|sh)?\n(.*?)```", text, re.S)
    assert block, "README.md must hold the set-up commands after <!-- setup-commands -->"
    lines = [ln for ln in block.group(1).splitlines() if ln.strip() and not ln.startswith("#")]
    return lines


def test_two_commands():
    cmds = readme_commands()
    assert len(cmds) == 2
    assert "nfb run jobs/quickstart.toml" in cmds[0]
    assert ".[test]" in cmds[1] and "pytest" in cmds[1]


def test_ci_runs_them_verbatim():
    ci = (ROOT / ".ci" / "run").read_text()
    lines = [ln.strip() for ln in ci.splitlines()]
    first, second = readme_commands()
    assert any(ln.startswith(first + " ") or ln == first for ln in lines), first
    assert any(ln.startswith(second + " ") or ln == second for ln in lines), second
    assert "NFB_REQUIRE_SERVICES=1" in ci
    assert "apt-get install" in ci and "postgresql" in ci and "chromium-driver" in ci
    assert os.access(ROOT / ".ci" / "run", os.X_OK)


def test_readme_starts_with_the_job():
    text = (ROOT / "README.md").read_text()
    first_para = text.split("\n\n")[1] if text.startswith("#") else text.split("\n\n")[0]
    assert "newform" in first_para and "Γ0(N)" in first_para
