"""The package reads in the order the data flows: a stage imports only from earlier stages."""

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "fstats"

#: Stage order; a module may import fstats.<stage> only for stages at or before its own.
ORDER = ["errors", "inputs", "flow", "design", "fit", "group", "report", "study"]
#: Stages outside the main line and what they may use.
EXTRA = {
    "simulate": {"errors", "inputs", "flow", "simulate"},
    "cli": None,  # the shell may call everything
}


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(), filename=str(path))
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names = [node.module]
        else:
            continue
        for name in names:
            parts = name.split(".")
            if parts[0] == "fstats" and len(parts) > 1:
                found.add(parts[1])
    return found


def _stage(path: Path) -> str:
    rel = path.relative_to(PACKAGE)
    return rel.parts[0].removesuffix(".py")


MODULES = sorted(p for p in PACKAGE.rglob("*.py") if _stage(p) not in {"__init__", "__main__"})


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(PACKAGE)))
def test_stage_imports_only_earlier_stages(path):
    """Source: common practice - one-way data flow keeps stages testable on their own."""
    stage = _stage(path)
    imported = _imports(path)
    if stage in EXTRA:
        allowed = EXTRA[stage]
        if allowed is None:
            return
    else:
        allowed = set(ORDER[: ORDER.index(stage) + 1])
    bad = {name for name in imported if name not in allowed and name in ORDER + list(EXTRA)}
    assert not bad, f"{path.relative_to(PACKAGE)} ({stage}) imports later stage(s) {sorted(bad)}"


def test_every_module_lists_all():
    """Source: common practice - each module states its public names in __all__."""
    missing = []
    for path in MODULES:
        if path.name.startswith("_") and path.name != "__init__.py":
            continue
        tree = ast.parse(path.read_text())
        names = {
            t.id
            for node in tree.body
            if isinstance(node, ast.Assign | ast.AnnAssign)
            for t in (node.targets if isinstance(node, ast.Assign) else [node.target])
            if isinstance(t, ast.Name)
        }
        if "__all__" not in names:
            missing.append(str(path.relative_to(PACKAGE)))
    assert not missing, f"modules without __all__: {missing}"
