"""The package layout: imports point one way, from the command line down to the data, and the
stages that read, check and score files never import torch.

Read from the source with `ast`, so a function-level import counts as much as a module-level one;
imports under `if TYPE_CHECKING:` are for type checkers only and do not count.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "tagger"

# Lowest first: a module may import its own stage and the stages before it, never a later one.
STAGES = [
    "errors",
    "version",
    "data",
    "text",
    "config",
    "scoring",
    "reports",
    "network",
    "apply",
    "serve",  # needs apply only
    "unannotated",
    "training",
    "cli",
    "__main__",
    "__init__",  # the package's public API: loads what it offers lazily
]
WITHOUT_TORCH = {"version", "errors", "data", "text", "config", "scoring", "reports"}


def _stage(module: str) -> str:
    """'tagger.data.corpus' -> 'data'; the package itself -> '__init__'."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def _modules() -> dict[str, Path]:
    found = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
        if parts[-1] == "__init__" and len(parts) > 1:
            parts = parts[:-1]
        name = ".".join(parts)
        found[name if name != "tagger" else "tagger"] = path
    return found


def _is_type_checking(node: ast.If) -> bool:
    test = node.test
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


def _runtime_imports(path: Path) -> list[tuple[int, str]]:
    """(line, imported module) for every import that runs, at any depth."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found: list[tuple[int, str]] = []

    def visit(node: ast.AST) -> None:
        if isinstance(node, ast.If) and _is_type_checking(node):
            for child in node.orelse:
                visit(child)
            return
        if isinstance(node, ast.Import):
            found.extend((node.lineno, alias.name) for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.append((node.lineno, node.module))
            # `from tagger import x` may name a module
            if node.module == "tagger":
                found.extend((node.lineno, f"tagger.{alias.name}") for alias in node.names)
        for child in ast.iter_child_nodes(node):
            visit(child)

    visit(tree)
    return found


def test_every_module_belongs_to_a_stage() -> None:
    unknown = sorted(name for name in _modules() if _stage(name) not in STAGES)
    assert unknown == []


def test_imports_point_from_the_command_line_down_to_the_data() -> None:
    rank = {stage: i for i, stage in enumerate(STAGES)}
    wrong = []
    for name, path in _modules().items():
        own = _stage(name)
        for line, imported in _runtime_imports(path):
            if imported != "tagger" and not imported.startswith("tagger."):
                continue
            target = _stage(imported)
            if target == "__init__" and imported == "tagger":
                target = "__init__"
            if target in rank and target != own and rank[target] > rank[own]:
                wrong.append(
                    f"{path.relative_to(PACKAGE.parent)}:{line} ({own}) imports {imported}"
                )
    assert wrong == []


def test_reading_checking_and_scoring_never_import_torch() -> None:
    offending = []
    for name, path in _modules().items():
        if _stage(name) not in WITHOUT_TORCH:
            continue
        for line, imported in _runtime_imports(path):
            if imported.split(".")[0] in ("torch", "safetensors"):
                offending.append(f"{path.relative_to(PACKAGE.parent)}:{line} imports {imported}")
    assert offending == []


def test_the_layout_rule_catches_a_wrong_import(tmp_path: Path) -> None:
    # The checker itself must see an upward import and ignore a type-only one.
    module = tmp_path / "m.py"
    module.write_text(
        "from typing import TYPE_CHECKING\n"
        "if TYPE_CHECKING:\n    from tagger.apply.tagger import Tagger\n"
        "def f():\n    from tagger.training.loop import train\n"
    )
    assert _runtime_imports(module) == [(1, "typing"), (5, "tagger.training.loop")]


@pytest.mark.parametrize("command", ["check", "score", "convert"])
def test_file_commands_start_without_torch(command: str, tmp_path: Path) -> None:
    gold = tmp_path / "gold.txt"
    gold.write_text("Pitch\tB-PART\nbearing\tI-PART\nworn\tO\n\n", encoding="utf-8")
    args = {
        "check": [str(gold)],
        "score": [str(gold), str(gold)],
        "convert": [str(gold), str(tmp_path / "out.txt"), "--to", "BIOES"],
    }[command]
    code = (
        "import sys\n"
        "from typer.testing import CliRunner\n"
        "from tagger.cli import app\n"
        f"result = CliRunner().invoke(app, {[command, *args]!r})\n"
        "assert result.exit_code == 0, result.output\n"
        "print('torch' in sys.modules)\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip().splitlines()[-1] == "False"


def test_only_the_cluster_module_imports_dask() -> None:
    importing = sorted(
        {
            str(path.relative_to(PACKAGE.parent))
            for path in _modules().values()
            for _, imported in _runtime_imports(path)
            if imported.split(".")[0] in ("dask", "distributed")
        }
    )
    assert importing == ["tagger/apply/cluster.py"]
