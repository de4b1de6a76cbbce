"""The package layout: the numerical core stays free of I/O and UI libraries, the folders
import only downward in pipeline order, there is no import cycle, and README's Python
examples run as written."""

from __future__ import annotations

import ast
import json
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "livestep"

# What each folder may import from the others (besides itself and the top-level modules
# livestep.errors and livestep's own __version__): the pipeline order of README's layout.
ALLOWED: dict[str, set[str]] = {
    "steps": set(),
    "judge": {"steps"},
    "decode": {"steps"},
    "sources": {"steps", "decode"},
    "sinks": {"steps", "judge", "decode", "reports"},
    "tuning": {"steps", "judge"},
    "reports": {"steps", "judge", "decode", "sources", "tuning"},
    "live": {"steps", "judge", "decode", "sources", "sinks", "reports"},
    "bench": {"steps", "judge", "decode", "sources", "sinks", "live", "tuning"},
    "tui": {"steps", "judge", "decode", "sources", "sinks", "reports", "live", "bench",
            "tuning"},
    "cli": {"steps", "judge", "decode", "sources", "sinks", "reports", "live", "bench", "tui",
            "tuning"},
}


def module_name(path: Path) -> str:
    parts = path.relative_to(ROOT).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def imports(path: Path, *, top_level_only: bool) -> set[str]:
    """The livestep modules ``path`` imports (module level only, or anywhere)."""
    tree = ast.parse(path.read_text())
    nodes = tree.body if top_level_only else list(ast.walk(tree))
    found: set[str] = set()
    for node in nodes:
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            if node.module.startswith("livestep"):
                for alias in node.names:  # "from livestep.steps import measure" is a module
                    sub = f"{node.module}.{alias.name}"
                    found.add(sub if (PACKAGE.parent / (sub.replace(".", "/") + ".py")).exists()
                              else node.module)
        elif isinstance(node, ast.Import):
            found |= {a.name for a in node.names if a.name.startswith("livestep")}
        elif top_level_only and isinstance(node, ast.If):  # TYPE_CHECKING blocks count too
            found |= imports_in(node.body)
    return found


def imports_in(body: list[ast.stmt]) -> set[str]:
    return {n.module for n in body if isinstance(n, ast.ImportFrom) and n.module
            and n.module.startswith("livestep")}


def folder(module: str) -> str | None:
    parts = module.split(".")
    return parts[1] if len(parts) > 2 or (len(parts) == 2 and parts[1] in ALLOWED) else None


def test_folders_import_only_downward() -> None:
    wrong = []
    for path in sorted(PACKAGE.rglob("*.py")):
        here = folder(module_name(path))
        if here is None:
            continue
        for target in imports(path, top_level_only=False):
            there = folder(target)
            if there is not None and there != here and there not in ALLOWED[here]:
                wrong.append(f"{module_name(path)} imports {target}")
    assert wrong == []


def test_no_import_cycle() -> None:
    graph = {module_name(p): imports(p, top_level_only=True) for p in PACKAGE.rglob("*.py")}
    # A module's import also runs its package's __init__: keep the edges between modules.
    graph = {m: {t for t in ts if t in graph and t != m} for m, ts in graph.items()}
    done: set[str] = set()
    path: list[str] = []

    def visit(m: str) -> None:
        if m in path:
            raise AssertionError("import cycle: " + " -> ".join(path[path.index(m):] + [m]))
        if m in done:
            return
        path.append(m)
        for t in sorted(graph[m]):
            if not t.startswith(m + "."):  # a package importing its own modules is no cycle
                visit(t)
        path.pop()
        done.add(m)

    for m in sorted(graph):
        visit(m)


def test_the_core_loads_no_io_or_ui_library() -> None:
    code = ("import sys, json, livestep.steps, livestep.judge\n"
            "import livestep.steps.analysis, livestep.judge.verdict, livestep.judge.design\n"
            "import livestep.judge.statistics, livestep.judge.compare\n"
            "import livestep.tuning.suggest\n"
            "print(json.dumps(sorted(sys.modules)))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=ROOT).stdout
    loaded = {m.split(".")[0] for m in json.loads(out)}
    assert loaded.isdisjoint({"textual", "rich", "serial", "matplotlib"}), loaded


def test_analyze_loads_no_plotting_library(tmp_path: Path) -> None:
    # `analyze --json` and its tables must not pay for matplotlib (about 0.4 s of start-up):
    # only the HTML report loads it.
    code = ("import sys, json\n"
            "from livestep.cli import main\n"
            f"main(['analyze', '--json', {str(ROOT / 'fixtures' / 'belt-axis.csv')!r}])\n"
            "print(json.dumps(sorted(sys.modules)), file=sys.stderr)")
    err = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=tmp_path).stderr
    loaded = {m.split(".")[0] for m in json.loads(err.strip().splitlines()[-1])}
    assert "matplotlib" not in loaded and "textual" not in loaded


def test_modules_are_small_or_say_why() -> None:
    long = [p.name for p in PACKAGE.rglob("*.py")
            if len(p.read_text().splitlines()) > 420
            and "Why this module is long" not in (ast.get_docstring(ast.parse(p.read_text()))
                                                  or "")]
    assert long == []


def test_readme_python_examples_run(tmp_path: Path, monkeypatch) -> None:
    blocks = re.findall(r"```python\n(.*?)```", (ROOT / "README.md").read_text(), re.S)
    assert len(blocks) >= 3
    from livestep.sources.recording import RecordingReader

    chunks = list(RecordingReader(ROOT / "fixtures" / "belt-axis.csv"))
    namespace = {  # the arrays the examples assume: a recording's samples
        "t": np.concatenate([c.t for c in chunks]),
        "sp": np.concatenate([c.setpoint for c in chunks]),
        "fb": np.concatenate([c.feedback for c in chunks]),
    }
    os.symlink(ROOT / "fixtures", tmp_path / "fixtures")
    monkeypatch.chdir(tmp_path)
    for block in blocks:
        exec(compile(block, "README.md", "exec"), namespace)  # noqa: S102
    assert (tmp_path / "belt.html").stat().st_size > 10_000
