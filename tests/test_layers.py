"""The package's architecture, enforced: layers, private names, sizes.

``symbolic/`` is a stack of layer folders, lowest first (DEVELOPERS.md, "Architecture")::

    runtime → model → input → derivation → verification → analysis → render → (cli, api)

A module may import its own layer and the layers below it, never one above — imports inside
functions included (they still tie the layers together at run time).  Imports under
``if TYPE_CHECKING:`` are exempt: they only name types for annotations and never run.
No module imports another module's private (``_underscored``) names or reads another
module's private attributes, and modules and functions stay short enough to review.

Common practice, no source: the limits below (500 lines a module, 80 a function) are the
project's own review rule.
"""

from __future__ import annotations

import ast
from dataclasses import dataclass
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "symbolic"

#: The layers, lowest first; the package root's modules (``cli``, ``api``, ``__main__``,
#: ``__init__``) form the top layer.
LAYERS = ("runtime", "model", "input", "derivation", "verification", "analysis", "render")
TOP = len(LAYERS)
MODULE_LINE_LIMIT = 500
FUNCTION_LINE_LIMIT = 80


@dataclass(frozen=True)
class Import:
    module: str  # the importing module, dotted within symbolic ("derivation.pipeline")
    target: str  # the imported module, dotted within symbolic
    names: tuple[str, ...]  # names taken from it ("from target import a, b"), else ()
    line: int
    type_only: bool  # under `if TYPE_CHECKING:`


def modules_of(package: Path) -> dict[str, Path]:
    """Every module of ``package``, keyed by its name dotted within the package."""
    found = {}
    for path in sorted(package.rglob("*.py")):
        parts = list(path.relative_to(package).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        found[".".join(parts)] = path
    return found


MODULES = modules_of(PACKAGE)


def layer_of(dotted: str) -> int:
    """The layer index of a module dotted within symbolic ("" is the package itself)."""
    first = dotted.split(".", 1)[0]
    return LAYERS.index(first) if first in LAYERS else TOP


def _is_package(dotted: str, modules: dict[str, Path]) -> bool:
    return modules.get(dotted, Path()).name == "__init__.py" or dotted == ""


def _type_checking_nodes(tree: ast.AST) -> set[int]:
    inside: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            for child in node.body:
                inside.update(id(n) for n in ast.walk(child))
    return inside


def _resolve(module: str, node: ast.ImportFrom, modules: dict[str, Path]) -> str | None:
    """The target of ``from ... import`` as a module dotted within symbolic, or None."""
    if node.level == 0:
        name = node.module or ""
        if name != "symbolic" and not name.startswith("symbolic."):
            return None
        return name.removeprefix("symbolic").removeprefix(".")
    package = module.split(".") if _is_package(module, modules) else module.split(".")[:-1]
    package = [p for p in package if p]
    base = package[: len(package) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def imports_of(module: str, modules: dict[str, Path] = MODULES) -> list[Import]:
    """Every import of a symbolic module in ``module``, wherever it stands in the file."""
    tree = ast.parse(modules[module].read_text(encoding="utf-8"))
    type_only = _type_checking_nodes(tree)
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            target = _resolve(module, node, modules)
            if target is None:
                continue
            names = tuple(a.name for a in node.names)
            found.append(Import(module, target, names, node.lineno, id(node) in type_only))
            for name in names:  # "from . import sidecar": the name is itself a module
                sub = f"{target}.{name}" if target else name
                if sub in modules:
                    found.append(Import(module, sub, (), node.lineno, id(node) in type_only))
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name == "symbolic" or alias.name.startswith("symbolic."):
                    target = alias.name.removeprefix("symbolic").removeprefix(".")
                    found.append(Import(module, target, (), node.lineno, id(node) in type_only))
    return found


ALL_IMPORTS = [imp for module in MODULES for imp in imports_of(module)]


def test_every_module_sits_in_a_layer_folder_or_at_the_top():
    stray = [m for m in MODULES if "." not in m and m and m not in LAYERS]
    assert set(stray) <= {"cli", "api", "__main__"}, stray


def test_no_module_imports_a_layer_above_its_own():
    upward = [
        f"{imp.module} (layer {layer_of(imp.module)}) imports {imp.target or 'symbolic'}"
        f" (layer {layer_of(imp.target)}) at line {imp.line}"
        for imp in ALL_IMPORTS
        if not imp.type_only and layer_of(imp.target) > layer_of(imp.module)
    ]
    assert upward == []


def test_layer_packages_and_their_init_files_import_nothing_above():
    for layer in LAYERS:
        assert layer in MODULES, f"symbolic/{layer}/__init__.py is missing"


def _module_aliases(module: str, modules: dict[str, Path]) -> dict[str, str]:
    """Local names bound to symbolic modules in ``module`` (``from . import x as y``)."""
    tree = ast.parse(modules[module].read_text(encoding="utf-8"))
    aliases = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            target = _resolve(module, node, modules)
            if target is None:
                continue
            for a in node.names:
                sub = f"{target}.{a.name}" if target else a.name
                if sub in modules:
                    aliases[a.asname or a.name] = sub
    return aliases


def private_attribute_reads(modules: dict[str, Path]) -> list[str]:
    """``alias._name`` where ``alias`` is another symbolic module imported by name."""
    found = []
    for module, path in modules.items():
        aliases = _module_aliases(module, modules)
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if (
                isinstance(node, ast.Attribute)
                and isinstance(node.value, ast.Name)
                and node.value.id in aliases
                and node.attr.startswith("_")
                and not node.attr.startswith("__")
            ):
                found.append(f"{module} reads {aliases[node.value.id]}.{node.attr}")
    return found


def private_name_imports(imports: list[Import]) -> list[str]:
    return [
        f"{imp.module} imports {imp.target}.{name} (line {imp.line})"
        for imp in imports
        for name in imp.names
        if name.startswith("_") and not name.startswith("__") and imp.target != imp.module
    ]


def test_no_module_imports_private_names_of_another():
    assert private_name_imports(ALL_IMPORTS) == []


def test_no_module_reads_private_attributes_of_another():
    assert private_attribute_reads(MODULES) == []


def test_modules_are_short_enough_to_review():
    long = {
        m: n
        for m, p in MODULES.items()
        if (n := len(p.read_text(encoding="utf-8").splitlines())) > MODULE_LINE_LIMIT
    }
    assert long == {}


def test_functions_are_short_enough_to_review():
    long = []
    for module, path in MODULES.items():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
                length = node.end_lineno - node.lineno + 1
                if length > FUNCTION_LINE_LIMIT:
                    long.append(f"{module}.{node.name}: {length} lines")
    assert long == []


# --- the checker itself, on code written to break each rule -------------------------------
@pytest.fixture
def fake_package(tmp_path):
    """A throwaway ``symbolic`` tree, for checking the checker on code that breaks a rule."""
    root = tmp_path / "symbolic"
    for layer in ("model", "derivation", "render"):
        (root / layer).mkdir(parents=True)
        (root / layer / "__init__.py").write_text("")
    (root / "__init__.py").write_text("")

    def install(files: dict[str, str]) -> tuple[list[Import], dict[str, Path]]:
        for rel, text in files.items():
            (root / rel).write_text(text)
        modules = modules_of(root)
        return [imp for m in modules for imp in imports_of(m, modules)], modules

    return install


def test_checker_finds_an_upward_import_inside_a_function(fake_package):
    imports, _modules = fake_package(
        {
            "derivation/gains.py": "def f():\n    from ..render.page import g\n    return g\n",
            "render/page.py": "def g():\n    return 1\n",
        }
    )
    up = [i for i in imports if layer_of(i.target) > layer_of(i.module) and not i.type_only]
    assert [(i.module, i.target) for i in up] == [("derivation.gains", "render.page")]


def test_checker_allows_type_checking_imports_and_reads_absolute_ones(fake_package):
    imports, _modules = fake_package(
        {
            "model/result.py": (
                "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n"
                "    from ..derivation.gains import Gain\n"
                "import symbolic.render.page\n"
            ),
            "derivation/gains.py": "class Gain: ...\n",
            "render/page.py": "",
        }
    )
    by_target = {i.target: i for i in imports}
    assert by_target["derivation.gains"].type_only
    assert not by_target["render.page"].type_only
    assert layer_of("render.page") > layer_of("model.result")


def test_checker_finds_private_names_imported_or_read(fake_package):
    imports, modules = fake_package(
        {
            "model/values.py": "def _hidden():\n    return 1\n",
            "derivation/gains.py": (
                "from ..model.values import _hidden\nfrom ..model import values as v\n"
                "def f():\n    return v._hidden() + _hidden()\n"
            ),
        }
    )
    assert private_name_imports(imports) == [
        "derivation.gains imports model.values._hidden (line 1)"
    ]
    assert private_attribute_reads(modules) == ["derivation.gains reads model.values._hidden"]
