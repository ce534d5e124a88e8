"""The house: four floors whose imports run one way, short modules, no backslash lines.

``scaling/stats`` (numbers) imports no other floor; ``scaling/render`` (words,
report, figures) reads ``stats`` and the config objects of ``scaling/io``;
``scaling/io`` (config, tables, saved results, output folder) reads only the
vocabulary of ``stats`` (the schema, log bases, units); ``scaling/run`` (the
stages) may read all three; the public face (``api``, ``cli``) sits on top.
``errors`` and ``_version`` are leaves every floor may import.  A result in
``stats`` opens upward only through a door, a method of a given name that
hands the result to one module of ``render`` inside the method (``plot`` to
``render.plots``, ``summary`` to ``render.summaries``, see ``DOORS``), so
numbers carry no words and load no figures.  Every import is read with
:mod:`ast`, those inside functions and under ``TYPE_CHECKING`` too.  Rules of
the house, no external source (common practice for layered packages, no
source).
"""
from __future__ import annotations

import ast
import sys
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "scaling"
LEAVES = {"scaling.errors", "scaling._version"}
#: floor -> the other floors (or single modules) it may import
ALLOWED = {
    "stats": set(),
    "render": {"scaling.stats", "scaling.io.config"},
    "io": {"scaling.stats.schema", "scaling.stats.logscale", "scaling.stats.units"},
    "run": {"scaling.stats", "scaling.render", "scaling.io"},
}
TOP = {"scaling", "scaling.api", "scaling.cli", "scaling.errors", "scaling._version",
       "scaling.__init__"}
MAX_LINES = 900
#: The doors upward: method name -> the one ``render`` module a method of that name
#: in ``stats`` may import, inside the method (a result hands itself over to be drawn
#: or worded; numbers never load matplotlib or hold a sentence).
DOORS = {
    "plot": "scaling.render.plots",
    "summary": "scaling.render.summaries",
}


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def floor_of(name: str) -> str | None:
    parts = name.split(".")
    return parts[1] if len(parts) > 2 or (len(parts) == 2 and parts[1] in ALLOWED) else None


def imported_names(path: Path) -> list[tuple[int, str]]:
    """Every ``scaling`` module the file imports, resolved to absolute names."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    here = module_name(path)
    package = here if path.name == "__init__.py" else here.rpartition(".")[0]
    found = []
    # node -> the module its enclosing door method may import
    door_of = {id(n): DOORS[f.name] for f in ast.walk(tree)
               if isinstance(f, (ast.FunctionDef, ast.AsyncFunctionDef)) and f.name in DOORS
               for n in ast.walk(f)}
    for node in ast.walk(tree):
        if id(node) in door_of:
            if isinstance(node, ast.ImportFrom) and (node.module or "").endswith(
                    door_of[id(node)].split(".", 1)[1]):
                continue
        if isinstance(node, ast.Import):
            found += [(node.lineno, a.name) for a in node.names if a.name.startswith("scaling")]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if not target.startswith("scaling"):
                continue
            if node.module is None or node.level and not node.module:
                # "from . import x": each name is a module of that package
                found += [(node.lineno, f"{target}.{a.name}") for a in node.names]
            else:
                found.append((node.lineno, target))
    return found


def allowed(importer: str, imported: str) -> bool:
    floor = floor_of(importer)
    if floor is None or imported in LEAVES:
        return True
    if imported == f"scaling.{floor}" or imported.startswith(f"scaling.{floor}."):
        return True
    return any(imported == a or imported.startswith(a + ".") for a in ALLOWED[floor])


def modules() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def wrong_imports() -> list[str]:
    wrong = []
    for path in modules():
        importer = module_name(path)
        for line, imported in imported_names(path):
            if not allowed(importer, imported):
                wrong.append(f"{path.relative_to(PACKAGE.parent)}:{line}: {importer} -> {imported}")
    return wrong


class TestFloors:
    def test_every_module_lives_on_a_floor_or_is_the_public_face(self):
        stray = [module_name(p) for p in modules()
                 if floor_of(module_name(p)) is None and module_name(p) not in TOP]
        assert stray == []

    def test_imports_run_one_way(self):
        assert wrong_imports() == []

    def test_a_wrong_import_is_caught(self, tmp_path, monkeypatch):
        # teeth: a stats module that reads a sentence from render must be refused
        assert not allowed("scaling.stats.lines", "scaling.render.wording")
        assert not allowed("scaling.render.report", "scaling.run.pipeline")
        assert not allowed("scaling.io.output", "scaling.render.report")
        assert allowed("scaling.run.fits", "scaling.stats.lines")
        assert allowed("scaling.render.figures", "scaling.io.config")
        planted = tmp_path / "scaling" / "stats" / "planted.py"
        planted.parent.mkdir(parents=True)
        planted.write_text("from ..render.wording import CAUTION\n", encoding="utf-8")
        # a result's plot method may hand itself to render.plots; nothing else may
        (planted.parent / "door.py").write_text(
            "def plot(self):\n    from ..render.plots import plot_fit\n"
            "def other(self):\n    from ..render.plots import plot_fit\n", encoding="utf-8")
        # a summary method may hand itself to render.summaries, and to no other
        # render module: each door opens onto its own room
        (planted.parent / "words.py").write_text(
            "def summary(self):\n    from ..render.summaries import line_fit_summary\n"
            "def summary(self):\n    from ..render.wording import describe_test\n"
            "def plot(self):\n    from ..render.summaries import line_fit_summary\n",
            encoding="utf-8")
        monkeypatch.setattr(sys.modules[__name__], "PACKAGE", tmp_path / "scaling")
        assert wrong_imports() == [
            "scaling/stats/door.py:4: scaling.stats.door -> scaling.render.plots",
            "scaling/stats/planted.py:1: scaling.stats.planted -> scaling.render.wording",
            "scaling/stats/words.py:4: scaling.stats.words -> scaling.render.wording",
            "scaling/stats/words.py:6: scaling.stats.words -> scaling.render.summaries"]


class TestModules:
    def test_no_module_passes_the_line_limit(self):
        long = {str(p.relative_to(PACKAGE.parent)): n for p in modules()
                if (n := len(p.read_text(encoding="utf-8").splitlines())) > MAX_LINES}
        assert long == {}

    def test_no_backslash_continuation_lines(self):
        found = [f"{path.relative_to(PACKAGE.parent)}:{i}" for path in modules()
                 for i, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1)
                 if line.rstrip().endswith("\\") and not _inside_string(path, i)]
        assert found == []


def _inside_string(path: Path, line: int) -> bool:
    """True when the line is part of a string literal (a docstring's backslash)."""
    cache = _STRING_LINES.setdefault(path, _string_lines(path))
    return line in cache


_STRING_LINES: dict = {}


def _string_lines(path: Path) -> set:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    lines = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            lines.update(range(node.lineno, (node.end_lineno or node.lineno)))
    return lines
