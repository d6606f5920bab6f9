"""The layout shows the architecture: imports flow one way, private names stay in their module.

Every module of ``paths/`` is parsed with the standard library's ``ast`` (every
``import`` statement, also those inside functions).  The layer order is the
one of DEVELOPERS.md ("Architecture map"): data → core → engines → selection →
threshold → present → workflows → cli; a module may import from its own layer
and the layers before it.  A name with a leading underscore is private to its
module (PEP 8, "Descriptive: Naming Styles"): importing one from another module
fails.  The package root (``paths/__init__.py``, a lazy name table) is exempt.
No function is longer than the style limit (docstring aside).
"""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "paths"
LAYERS = ("data", "core", "engines", "selection", "threshold", "present", "workflows", "cli")


def _modules():
    for path in sorted(ROOT.rglob("*.py")):
        rel = path.relative_to(ROOT.parent).with_suffix("")
        parts = list(rel.parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        yield ".".join(parts), path


def _imports(name: str, path: Path):
    """(line, imported module, imported names) for every import of the module ``name``."""
    is_package = path.name == "__init__.py"
    package = name if is_package else name.rpartition(".")[0]
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield node.lineno, alias.name, ()
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - (node.level - 1)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            yield node.lineno, mod, tuple(a.name for a in node.names)


def _layer(module: str):
    parts = module.split(".")
    if parts[0] != "paths" or len(parts) < 2:
        return None
    return LAYERS.index(parts[1]) if parts[1] in LAYERS else None


MODULES = dict(_modules())


def test_every_module_sits_in_a_layer():
    stray = [m for m in MODULES if m != "paths" and _layer(m) is None]
    assert stray == [], f"modules outside the layers {LAYERS}: {stray}"


def _edges():
    for name, path in MODULES.items():
        if name == "paths":
            continue
        for line, mod, names in _imports(name, path):
            if mod.split(".")[0] == "paths":
                yield name, path, line, mod, names


def test_imports_flow_with_the_layers():
    """No module imports from a later layer (e.g. core from present, workflows from cli)."""
    bad = []
    for name, path, line, mod, names in _edges():
        src, dst = _layer(name), _layer(mod)
        if dst is None:
            # "from paths import x" / "from paths.layer import module": the layer of the name
            subs = [_layer(f"{mod}.{n}") for n in names]
            dst = max((s for s in subs if s is not None), default=None)
        if dst is not None and dst > src:
            bad.append(f"{path.relative_to(ROOT.parent)}:{line}: {name} ({LAYERS[src]}) "
                       f"imports {mod} ({LAYERS[dst]})")
    assert bad == [], "imports against the layer order:\n" + "\n".join(bad)


def test_no_private_name_is_imported_from_another_module():
    bad = []
    for name, path, line, mod, names in _edges():
        private_module = [p for p in mod.split(".") if p.startswith("_") and p != "__init__"]
        private_names = [n for n in names if n.startswith("_") and not n.endswith("__")]
        if (private_module or private_names) and mod != name:
            bad.append(f"{path.relative_to(ROOT.parent)}:{line}: {name} imports "
                       f"{', '.join(private_names) or mod} from {mod}")
    assert bad == [], "private names imported across modules:\n" + "\n".join(bad)


@pytest.mark.parametrize("layer", ["workflows", "cli"])
def test_functions_of_the_orchestration_layers_are_short(layer):
    """Functions in workflows/ and cli/ stay readable: at most 80 lines (signature included)."""
    long = []
    for name, path in MODULES.items():
        if name.split(".")[1:2] != [layer]:
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                n = node.end_lineno - node.lineno + 1
                if n > 80:
                    long.append(f"{path.relative_to(ROOT.parent)}:{node.lineno} {node.name}: "
                                f"{n} lines")
    assert long == [], "functions over 80 lines:\n" + "\n".join(long)


# The project's style rule (functions short, one job each): common practice, no source.
MAX_FUNCTION_LINES = 80


def _body_lines(node) -> int:
    """Lines of a function (signature included) less those of its docstring."""
    n = node.end_lineno - node.lineno + 1
    first = node.body[0] if node.body else None
    if (isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant)
            and isinstance(first.value.value, str)):
        n -= first.end_lineno - first.lineno + 1
    return n


def test_no_function_is_longer_than_the_style_limit():
    """Every function of ``paths/`` (methods and nested functions too) has at most
    ``MAX_FUNCTION_LINES`` lines besides its docstring."""
    long = []
    for path in MODULES.values():
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for node in ast.walk(tree):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                n = _body_lines(node)
                if n > MAX_FUNCTION_LINES:
                    long.append(f"{path.relative_to(ROOT.parent)}:{node.lineno} {node.name}: "
                                f"{n} lines (docstring aside)")
    assert long == [], (f"functions over {MAX_FUNCTION_LINES} lines; split them into private "
                        "helpers with one job each:\n" + "\n".join(long))
