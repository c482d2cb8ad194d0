"""Checks of the project's own rules: layering, the README/CI test command, hygiene."""

from __future__ import annotations

import ast
import re
import subprocess
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(a.name.split(".")[0] for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module.split(".")[0])
    return names


def test_layers_import_one_way() -> None:
    """stream/ imports neither replay/ nor tui/; replay/ never imports tui/."""
    forbidden = {"stream": {"replay", "tui"}, "replay": {"tui"}}
    bad = []
    for pkg, banned in forbidden.items():
        for path in sorted((ROOT / pkg).rglob("*.py")):
            hit = _imports(path) & banned
            if hit:
                bad.append(f"{path.relative_to(ROOT)} imports {sorted(hit)}")
    assert not bad, "layering broken:\n" + "\n".join(bad)


def _readme_commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    return re.findall(r"```(?:sh|bash|console)?\n(python3 -m venv[^\n]*)\n```", text)


def test_readme_gives_two_setup_commands_and_ci_runs_the_test_one() -> None:
    cmds = _readme_commands()
    assert len(cmds) >= 2, "README must give the demo and the test set-up commands"
    demo, tests = cmds[0], cmds[1]
    assert "lobewatch demo" in demo
    assert "pytest" in tests
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    assert tests.replace("python3", "$PY", 1) in ci, "CI must run README's test command verbatim"


def test_no_machine_paths_in_tracked_files() -> None:
    files = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True,
                           check=True).stdout.split()
    pattern = re.compile(r"""(^|[ "'=(])/(root|home)/""")
    hits = []
    for name in files:
        path = ROOT / name
        if path.suffix in {".svg", ".png", ".lwsession"} or not path.is_file():
            continue
        try:
            text = path.read_text(encoding="utf-8")
        except UnicodeDecodeError:
            continue
        for i, line in enumerate(text.splitlines(), 1):
            if pattern.search(line):
                hits.append(f"{name}:{i}")
    assert not hits, hits
