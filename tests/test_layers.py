"""Architecture: one import direction (DESIGN.md section 2): chemistry -> treatment -> figures -> widgets, the
scenario files and the figure pack above the treatment layer, and no module importing in a circle, inside a layer
or across layers. Imports are read from the source (every ``import`` statement, those inside functions too), so a
circle closed by a deferred import is found as well."""

import ast
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "workbench"

#: each module's layer; a module may import its own layer and those below it, never one above
LAYERS = (
    ("base", ("workbench.errors", "workbench._paths")),
    ("chemistry", ("workbench.chemistry",)),
    ("treatment", ("workbench.treatment",)),
    ("figures", ("workbench.figures",)),
    ("files", ("workbench.scenario",)),
    ("api", ("workbench",)),  # the package itself: `import workbench as wb` re-exports the treatment layer
    ("pack", ("workbench.export",)),
    ("widgets", ("workbench.widgets",)),
    ("command line", ("workbench.__main__",)),
)


def _module_name(path: Path) -> str:
    parts = path.relative_to(ROOT).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


MODULES = {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _layer(module: str) -> int:
    best, rank = -1, None
    for i, (_, prefixes) in enumerate(LAYERS):
        for prefix in prefixes:
            if (module == prefix or module.startswith(prefix + ".")) and len(prefix) > best:
                best, rank = len(prefix), i
    assert rank is not None, f"{module}: add it to a layer in tests/test_layers.py"
    return rank


def _imports(module: str) -> set[str]:
    """The workbench modules this module imports by name (a package's __init__ only when named itself)."""
    path = MODULES[module]
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(
                    package.split(".")[: len(package.split(".")) - node.level + 1] + ([base] if base else [])
                )
            names = [
                f"{base}.{alias.name}" if f"{base}.{alias.name}" in MODULES else base for alias in node.names
            ]
        else:
            continue
        found |= {name for name in names if name in MODULES and name != module}
    return found


GRAPH = {module: _imports(module) for module in MODULES}


def test_chemistry_imports_without_plotly_or_widgets():
    code = (
        "import sys, workbench.chemistry.solver, workbench.chemistry.tableau, workbench.treatment.solubility;"
        "bad = [m for m in ('plotly', 'ipywidgets') if m in sys.modules]; print(bad); sys.exit(1 if bad else 0)"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr


def test_every_module_imports_only_its_own_layer_or_those_below():
    upward = [
        f"{module} ({LAYERS[_layer(module)][0]}) imports {target} ({LAYERS[_layer(target)][0]})"
        for module, targets in GRAPH.items()
        for target in sorted(targets)
        if _layer(target) > _layer(module)
    ]
    assert not upward, "imports against the layer order:\n" + "\n".join(upward)


def test_no_module_imports_in_a_circle():
    """Depth-first search over the import graph: any edge back to a module on the current path closes a circle."""
    circles, state = [], dict.fromkeys(GRAPH, 0)  # 0 unvisited, 1 on the path, 2 done

    def visit(module, path):
        state[module] = 1
        for target in sorted(GRAPH[module]):
            if state[target] == 1:
                circles.append(" -> ".join(path[path.index(target) :] + [target]))
            elif state[target] == 0:
                visit(target, path + [target])
        state[module] = 2

    for module in sorted(GRAPH):
        if state[module] == 0:
            visit(module, [module])
    assert not circles, "modules importing in a circle:\n" + "\n".join(circles)


def test_the_import_graph_sees_the_engines_and_their_shared_module():
    # the checks above are only as good as the graph: it must see imports at the top and inside functions
    solver, graph = "workbench.chemistry.solver", GRAPH
    assert {"workbench.chemistry.equations", "workbench.chemistry.numpy_engine"} <= graph[solver]
    assert "workbench.chemistry.compiled_engine" in graph[solver]  # imported inside solve()
    assert "workbench.chemistry.equations" in graph["workbench.chemistry.kernel"]
    compiled = {"workbench.chemistry.compiled_engine", "workbench.chemistry.kernel"}
    for module in compiled:
        assert not {solver, "workbench.chemistry.numpy_engine"} & graph[module]
    assert not ({solver} | compiled) & graph["workbench.chemistry.numpy_engine"]


def test_no_private_name_is_imported_from_another_module():
    """A name another module needs is public in its own module: no ``from x import _name`` and no
    ``module._name`` on an imported workbench module."""
    found = []
    for module, path in MODULES.items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        aliases = {}
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("workbench"):
                for alias in node.names:
                    if alias.name.startswith("_") and not alias.name.startswith("__"):
                        found.append(f"{module}: from {node.module} import {alias.name}")
                    if f"{node.module}.{alias.name}" in MODULES:
                        aliases[alias.asname or alias.name] = f"{node.module}.{alias.name}"
            elif isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name.startswith("workbench"):
                        aliases[alias.asname or alias.name] = alias.name
        for node in ast.walk(tree):
            if (
                isinstance(node, ast.Attribute)
                and isinstance(node.value, ast.Name)
                and node.value.id in aliases
                and node.attr.startswith("_")
                and not node.attr.startswith("__")
            ):
                found.append(f"{module}: {node.value.id}.{node.attr}")
    assert not found, "private names used across modules:\n" + "\n".join(found)


def test_every_subpackage_is_listed_for_installation():
    # pyproject lists packages by hand (data/ is mapped in); a missing entry would drop a subpackage from wheels
    import tomllib

    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    found = {".".join(p.parent.relative_to(ROOT).parts) for p in PACKAGE.rglob("__init__.py")}
    assert found <= listed, f"add to pyproject [tool.setuptools] packages: {sorted(found - listed)}"
