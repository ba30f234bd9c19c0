"""The structure docs/architecture.md promises, checked on the code itself.

Layers (what each package may import, function-level imports included), no import cycle between
modules, no module over 600 lines, no function over 80 lines without a comment saying why, and
a numpydoc docstring with a runnable Examples section on every public name of the flat namespace
and of each package (common practice, no source: these are the project's own rules).
"""

from __future__ import annotations

import ast
import importlib
import inspect
from pathlib import Path

import pytest

import tracefit

PKG = Path(tracefit.__file__).resolve().parent

# docs/architecture.md, "Packages: what each owns and what it may import".
BASE = {"errors", "options", "conventions", "atomic", "cores"}
ALLOWED = {
    "errors": set(),
    "atomic": set(),
    "cores": set(),
    "options": {"errors"},
    "conventions": {"errors"},
    "crystal": {"errors", "conventions"},
    "predict": {"errors", "conventions", "options", "crystal"},
    "image": {"errors", "conventions", "options", "cores"},
    "maps": {"errors", "conventions", "options", "crystal", "atomic"},
    "matching": {"errors", "conventions", "options", "crystal", "predict"},
    "results": {"errors", "conventions", "crystal"},
    "pipeline": BASE | {"crystal", "predict", "image", "maps", "matching", "results"},
    "viz": BASE | {"crystal", "predict", "image", "matching", "results"},
    "stats": BASE | {"crystal", "predict", "results"},
    "survey": BASE | {"crystal", "predict", "image", "maps", "matching", "results", "pipeline", "viz"},
    "demo": BASE | {"survey", "stats", "matching", "crystal", "conventions"},
    "cli": None,  # the command line may import anything
    "__init__": None,
    "__main__": None,
}


def _modules():
    for p in sorted(PKG.rglob("*.py")):
        rel = p.relative_to(PKG.parent).with_suffix("")
        name = ".".join(rel.parts)
        if name.endswith(".__init__"):
            name = name[: -len(".__init__")]
        yield name, p


def _runtime_nodes(tree):
    """Every node except those under ``if TYPE_CHECKING:`` (imports for type checkers only)."""
    todo = [tree]
    while todo:
        node = todo.pop()
        yield node
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.If) and "TYPE_CHECKING" in ast.unparse(child.test):
                todo.extend(child.orelse)
                continue
            todo.append(child)


def _imports(path: Path, modname: str) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    out = set()
    for node in _runtime_nodes(tree):
        if isinstance(node, ast.Import):
            out.update(a.name for a in node.names if a.name.startswith("tracefit"))
        elif isinstance(node, ast.ImportFrom):
            if node.level:  # relative import
                base = modname.split(".")[: -node.level] if not path.name == "__init__.py" else modname.split(".")[: len(modname.split(".")) - node.level + 1]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            if mod.startswith("tracefit"):
                out.add(mod)
                out.update(f"{mod}.{a.name}" for a in node.names)
    return out


def _layer(modname: str) -> str:
    parts = modname.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def test_every_package_imports_only_the_layers_below_it():
    bad = []
    for name, path in _modules():
        own = _layer(name)
        allowed = ALLOWED.get(own, "missing")
        assert allowed != "missing", f"{name}: package {own!r} is not in the layer table"
        if allowed is None:
            continue
        for imp in _imports(path, name):
            other = _layer(imp)
            if other in (own, "__init__") or imp == "tracefit":
                continue
            if other not in allowed:
                bad.append(f"{name} imports {imp}")
    assert not bad, "\n".join(sorted(set(bad)))


def test_no_import_cycle_between_modules():
    mods = dict(_modules())
    graph = {}
    for name, path in mods.items():
        deps = set()
        for imp in _imports(path, name):
            while imp and imp not in mods:
                imp = imp.rpartition(".")[0]
            if imp and imp != name and not name.startswith(imp + ".") and not imp.startswith(name + "."):
                deps.add(imp)
        graph[name] = deps
    # a package's __init__ re-exports its modules: edges into a package mean edges into what it re-exports
    state, stack, cycles = {}, [], []

    def visit(n):
        state[n] = 1
        stack.append(n)
        for m in graph.get(n, ()):
            if _is_init(m, mods) and _layer(m) == _layer(n):
                continue  # a module importing its own package's namespace
            if state.get(m) == 1:
                cycles.append(stack[stack.index(m):] + [m])
            elif not state.get(m):
                visit(m)
        stack.pop()
        state[n] = 2

    for n in graph:
        if not state.get(n):
            visit(n)
    assert not cycles, "\n".join(" -> ".join(c) for c in cycles[:5])


def _is_init(name, mods):
    return mods[name].name == "__init__.py"


def test_no_module_over_600_lines():
    long = [f"{n} ({sum(1 for _ in p.open(encoding='utf-8'))} lines)" for n, p in _modules()
            if sum(1 for _ in p.open(encoding="utf-8")) > 600]
    assert not long, long


def test_long_functions_say_why():
    missing = []
    for name, path in _modules():
        lines = path.read_text(encoding="utf-8").splitlines()
        for node in ast.walk(ast.parse("\n".join(lines))):
            if not isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                continue
            if node.end_lineno - node.lineno + 1 <= 80:
                continue
            first = min([node.lineno] + [d.lineno for d in node.decorator_list])
            above = [ln.strip() for ln in lines[max(0, first - 4): first - 1]]
            body0 = node.body[1] if (len(node.body) > 1 and isinstance(node.body[0], ast.Expr)
                                     and isinstance(getattr(node.body[0], "value", None), ast.Constant)) else node.body[0]
            after_doc = [ln.strip() for ln in lines[node.body[0].end_lineno: body0.lineno - 1]] if body0 is not node.body[0] else []
            if not any(ln.startswith("#") for ln in above + after_doc):
                missing.append(f"{name}.{node.name} ({node.end_lineno - node.lineno + 1} lines)")
    assert not missing, missing


def _public_names():
    seen = set()
    for modname in ["tracefit", "tracefit.crystal", "tracefit.predict", "tracefit.image", "tracefit.maps",
                    "tracefit.matching", "tracefit.pipeline", "tracefit.results", "tracefit.options", "tracefit.survey", "tracefit.stats",
                    "tracefit.viz", "tracefit.conventions"]:
        mod = importlib.import_module(modname)
        for n in getattr(mod, "__all__", []):
            obj = getattr(mod, n)
            if not (inspect.isfunction(obj) or inspect.isclass(obj)) or id(obj) in seen:
                continue
            seen.add(id(obj))
            yield f"{modname}.{n}", obj


@pytest.mark.parametrize("name,obj", list(_public_names()), ids=lambda x: x if isinstance(x, str) else "")
def test_public_names_have_numpydoc_with_examples(name, obj):
    doc = inspect.getdoc(obj) or ""
    assert doc, f"{name} has no docstring"
    if inspect.isclass(obj) and issubclass(obj, BaseException):
        return
    assert "Examples\n--------" in doc and ">>>" in doc, f"{name}: no runnable Examples section"
