"""No module of bridge/ imports a later stage: the order is the one written in the contributor
guide (DEVELOPERS.md, the "Stage order:" line), read from there so the picture cannot drift."""

import ast
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def stage_levels() -> dict[str, int]:
    line = next(l for l in (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8").splitlines()
                if l.strip().startswith("Stage order:"))
    levels = {}
    for level, group in enumerate(line.split(":", 1)[1].split("|")):
        for name in re.split(r"[,\s]+", group.strip()):
            if name:
                levels[name] = level
    return levels


def imported_stages(path: Path, package_root: Path = ROOT / "bridge") -> list[tuple[int, str]]:
    """(line, top module of bridge) of every bridge import in one file, relative or absolute."""
    package = list(path.relative_to(package_root).parts[:-1])
    out = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.level:
            base = package[:len(package) - (node.level - 1)]
            mod = base + (node.module.split(".") if node.module else [])
            out += [(node.lineno, mod[0])] if mod else [(node.lineno, a.name) for a in node.names]
        elif isinstance(node, ast.ImportFrom) and (node.module or "").startswith("bridge."):
            out.append((node.lineno, node.module.split(".")[1]))
        elif isinstance(node, ast.Import):
            out += [(node.lineno, a.name.split(".")[1]) for a in node.names if a.name.startswith("bridge.")]
    return out


def test_every_module_of_bridge_has_a_stage():
    levels = stage_levels()
    tops = {p.name.removesuffix(".py") for p in (ROOT / "bridge").iterdir()
            if p.name != "__init__.py" and (p.suffix == ".py" or (p / "__init__.py").exists())}
    assert tops - set(levels) == set(), "add these to the Stage order line of DEVELOPERS.md"


def test_no_import_runs_up_the_stages():
    levels = stage_levels()
    up = []
    for path in sorted((ROOT / "bridge").rglob("*.py")):
        stage = path.relative_to(ROOT / "bridge").parts[0].removesuffix(".py")
        if stage == "__init__":
            continue
        for line, target in imported_stages(path):
            if target in levels and levels[target] > levels[stage]:
                up.append(f"{path.relative_to(ROOT)}:{line}: {stage} imports {target}")
    assert up == []


def test_the_check_sees_an_import_that_runs_up(tmp_path):
    # the checker itself, on made-up modules of the signal stage importing the service
    (tmp_path / "signal").mkdir()
    fake = tmp_path / "signal" / "probe.py"
    fake.write_text("from ..service import run\nimport bridge.cli\nfrom . import filters\n", encoding="utf-8")
    found = imported_stages(fake, tmp_path)
    assert found == [(1, "service"), (2, "cli"), (3, "signal")]
    assert [t for _, t in found if stage_levels()[t] > stage_levels()["signal"]] == ["service", "cli"]
