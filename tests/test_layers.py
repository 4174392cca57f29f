"""The package's import graph obeys the layer table of DEVELOPERS.md.

Every import statement of the package is read from the source (AST), the ones inside functions
included (lazy imports are imports too), and checked against the table under "## Layers" in
DEVELOPERS.md, which this test reads: a module may import only the layers its row lists. Also:
no module imports another module's private name (``from x import _y``, or ``x._y`` on an
imported module); the scan wing's compiled loops are imported by the scan wing only (their
maker, ``jit``, by the probes' rounding loops too); and
ipywidgets, IPython and matplotlib are imported only where the table says (httpx/attrs practice
of a thin public surface; design notes: the numeric core never imports UI or plotting).
"""

from __future__ import annotations

import ast
import re
from dataclasses import dataclass
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "widgets" / "bitprism"
DEVELOPERS = ROOT / "DEVELOPERS.md"


@dataclass(frozen=True)
class Layer:
    name: str
    prefixes: tuple[str, ...]  # dotted module names (a trailing "." matches a whole package)
    may_import: frozenset[str]
    libraries: frozenset[str]  # UI/plotting libraries it may import


def read_layers() -> list[Layer]:
    """The rows of the table under "## Layers": | layer | modules | may import | libraries |."""
    text = DEVELOPERS.read_text(encoding="utf-8")
    section = text.split("\n## Layers", 1)[1].split("\n## ", 1)[0]
    rows = [line for line in section.splitlines() if line.startswith("|")][2:]
    layers = []
    for row in rows:
        cells = [c.strip() for c in row.strip("|").split("|")]
        name, modules, allowed, libraries = cells[:4]
        prefixes = []
        for path in re.findall(r"`([^`]+)`", modules):
            dotted = "bitprism." + path.replace("/", ".")
            dotted = dotted.removesuffix(".py").removesuffix(".__init__")
            prefixes.append(dotted if path.endswith(".py") else dotted.rstrip(".") + ".")
        may = {name} | {a.strip() for a in allowed.split(",") if a.strip() and a.strip() != "—"}
        libs = {lib.strip() for lib in re.findall(r"`([^`]+)`", libraries)}
        layers.append(Layer(name, tuple(prefixes), frozenset(may), frozenset(libs)))
    return layers


LAYERS = read_layers()
UI_AND_PLOTTING = ("ipywidgets", "IPython", "matplotlib")


def module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


MODULES = {module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def layer_of(module: str) -> Layer:
    best: tuple[int, Layer] | None = None
    for layer in LAYERS:
        for prefix in layer.prefixes:
            hit = module == prefix or (prefix.endswith(".") and (module + ".").startswith(prefix))
            if hit and (best is None or len(prefix) > best[0]):
                best = (len(prefix), layer)
    if best is None:
        raise AssertionError(f"{module} is in no row of the layer table in DEVELOPERS.md")
    return best[1]


@dataclass(frozen=True)
class Import:
    importer: str
    target: str  # the imported module (dotted)
    names: tuple[str, ...]  # names taken from it (from-imports)
    line: int


def resolve(importer: str, module: str | None, level: int, is_package: bool) -> str:
    if level == 0:
        return module or ""
    base = importer.split(".")
    if not is_package:
        base = base[:-1]
    base = base[: len(base) - (level - 1)]
    return ".".join(base + ([module] if module else []))


def imports_of(name: str, path: Path) -> list[Import]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    is_package = path.name == "__init__.py"
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                out.append(Import(name, alias.name, (), node.lineno))
        elif isinstance(node, ast.ImportFrom):
            target = resolve(name, node.module, node.level, is_package)
            names = tuple(a.name for a in node.names)
            # "from . import display" imports a module: count it as an import of that module
            subs = [f"{target}.{n}" for n in names if f"{target}.{n}" in MODULES]
            rest = tuple(n for n in names if f"{target}.{n}" not in MODULES)
            if rest:
                out.append(Import(name, target, rest, node.lineno))
            out += [Import(name, s, (), node.lineno) for s in subs]
    return out


ALL_IMPORTS = [imp for name, path in MODULES.items() for imp in imports_of(name, path)]


def test_the_table_covers_every_module() -> None:
    assert LAYERS, "no layer table found under '## Layers' in DEVELOPERS.md"
    for name in MODULES:
        layer_of(name)


def test_no_import_points_up_the_table() -> None:
    wrong = []
    for imp in ALL_IMPORTS:
        if not imp.target.startswith("bitprism"):
            continue
        src, dst = layer_of(imp.importer), layer_of(imp.target)
        if dst.name not in src.may_import:
            wrong.append(f"{imp.importer}:{imp.line} ({src.name}) imports {imp.target} ({dst.name})")
    assert wrong == []


def test_no_module_imports_a_private_name_of_another() -> None:
    wrong = [
        f"{imp.importer}:{imp.line} takes {n} from {imp.target}"
        for imp in ALL_IMPORTS
        if imp.target.startswith("bitprism") and imp.target != imp.importer
        for n in imp.names
        if n.startswith("_") and not (n.startswith("__") and n.endswith("__"))
    ]
    for name, path in MODULES.items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        aliases = {}
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                for a in node.names:
                    if a.name.startswith("bitprism"):
                        aliases[a.asname or a.name.split(".")[0]] = a.name
            elif isinstance(node, ast.ImportFrom):
                target = resolve(name, node.module, node.level, path.name == "__init__.py")
                for a in node.names:
                    if f"{target}.{a.name}" in MODULES:
                        aliases[a.asname or a.name] = f"{target}.{a.name}"
        for node in ast.walk(tree):
            if (
                isinstance(node, ast.Attribute)
                and isinstance(node.value, ast.Name)
                and node.value.id in aliases
                and node.attr.startswith("_")
                and not node.attr.startswith("__")
            ):
                wrong.append(f"{name}:{node.lineno} reads {aliases[node.value.id]}.{node.attr}")
    assert wrong == []


def test_compiled_loops_are_imported_by_the_scan_wing_only() -> None:
    # their maker, jit.py (numba settings, disk cache), serves the probes' rounding loops too
    wrong = [
        f"{imp.importer}:{imp.line}"
        for imp in ALL_IMPORTS
        if imp.target.startswith("bitprism.tensors.scan.compiled")
        and imp.target != "bitprism.tensors.scan.compiled.jit"
        and not imp.importer.startswith("bitprism.tensors.scan")
    ]
    assert wrong == []


def test_ui_and_plotting_libraries_only_where_the_table_allows() -> None:
    wrong = []
    for imp in ALL_IMPORTS:
        top = imp.target.split(".")[0]
        if top in UI_AND_PLOTTING and top not in layer_of(imp.importer).libraries:
            wrong.append(f"{imp.importer}:{imp.line} imports {imp.target}")
    assert wrong == []


@pytest.mark.parametrize(
    "source,wanted",
    [
        ("from ..render.scan_text import scan_text\n", "up"),
        ("from .scan.plan import _helper\n", "private"),
    ],
)
def test_the_checks_catch_what_they_should(tmp_path: Path, source: str, wanted: str) -> None:
    """The checks themselves: a numerics module importing render, and a private import."""
    fake = tmp_path / "fake.py"
    fake.write_text(source)
    imps = imports_of("bitprism.tensors.fake", fake)
    if wanted == "up":
        assert layer_of(imps[0].target).name not in layer_of("bitprism.tensors.fake").may_import
    else:
        assert any(n.startswith("_") for imp in imps for n in imp.names)
