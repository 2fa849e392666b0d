"""Layering rules, read from the source.

The numeric core never loads the I/O, CLI or plotting stack; imports run one way
down the layers (cli -> pipeline -> io/plots/report -> estimate -> assess -> lti ->
base modules); no two modules import each other, directly or around a loop; and
no function of the numeric core is longer than a screenful.
"""

import ast
import subprocess
import sys
from pathlib import Path

import pytest

import ident

PACKAGE = Path(ident.__file__).resolve().parent
CORE_PACKAGES = ("lti", "estimate", "assess")
CORE_MODULES = sorted(
    f"ident.{pkg}.{path.stem}"
    for pkg in CORE_PACKAGES
    for path in (PACKAGE / pkg).glob("*.py")
    if path.stem != "__init__"
)

#: Layers, lowest first. A module may import from its own layer or a lower one.
LAYERS = (
    ("base", ("ident", "ident.errors", "ident.choices", "ident._json", "ident._validate", "ident._version")),
    ("lti", ("ident.lti",)),
    ("assess", ("ident.assess",)),
    ("estimate", ("ident.estimate",)),
    ("io/plots/report", ("ident.io", "ident.plots", "ident.report", "ident.fleet_report", "ident.display")),
    ("pipeline", ("ident.pipeline", "ident.fleet", "ident.api", "ident.demo")),
    ("cli", ("ident.cli", "ident.__main__")),
)

#: Longest function body (lines, docstring excluded) allowed in the numeric core.
MAX_FUNCTION_LINES = 80
#: Where the length rule applies: the three core sub-packages and the base modules.
LENGTH_RULE_FILES = sorted(
    [p for pkg in CORE_PACKAGES for p in (PACKAGE / pkg).glob("*.py")]
    + [PACKAGE / f"{name}.py" for name in ("errors", "choices", "_json", "_validate", "_version")]
)


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


MODULES = {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _layer(module: str) -> int:
    """Rank of the layer whose longest prefix names ``module`` (``ident`` itself is only the package)."""
    matches = [
        (len(pre), rank)
        for rank, (_, prefixes) in enumerate(LAYERS)
        for pre in prefixes
        if module == pre or (pre != "ident" and module.startswith(pre + "."))
    ]
    if not matches:
        raise AssertionError(f"module {module} belongs to no layer; add it to LAYERS in {__file__}")
    return max(matches)[1]


def _imports(module: str) -> set[str]:
    """ident modules imported anywhere in ``module`` (top level, functions, TYPE_CHECKING blocks)."""
    path = MODULES[module]
    package = module.split(".") if path.name == "__init__.py" else module.split(".")[:-1]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), filename=str(path))):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            for alias in node.names:
                # "from pkg import module" names a module; "from module import name" does not
                found.add(f"{target}.{alias.name}" if f"{target}.{alias.name}" in MODULES else target)
    return {name for name in found if name in MODULES and name != module}


GRAPH = {module: _imports(module) for module in MODULES}


def _cycles(graph: dict[str, set[str]]) -> list[tuple[list[str], list[str]]]:
    """Strongly connected components with more than one module (Tarjan): (one loop, all members)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    components: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                components.append(sorted(component))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return [(_loop_path(graph, comp), comp) for comp in components]


def _loop_path(graph: dict[str, set[str]], component: list[str]) -> list[str]:
    """One import loop through the first module of a strongly connected component."""
    start, members = component[0], set(component)
    paths = {start: [start]}
    queue = [start]
    while queue:  # breadth first inside the component, back to the start
        v = queue.pop(0)
        for w in sorted(graph[v] & members):
            if w == start:
                return paths[v] + [start]
            if w not in paths:
                paths[w] = paths[v] + [w]
                queue.append(w)
    return component


def test_the_numeric_core_lives_in_three_folders():
    # the rules below read these lists; an empty list would make them pass vacuously
    assert {"ident.lti.models", "ident.estimate.identify", "ident.assess.modes"} <= set(CORE_MODULES)
    top_level = sorted(p.stem for p in PACKAGE.glob("*.py"))
    assert top_level == ["__init__", "__main__", "_json", "_validate", "_version", "api", "choices", "display",
                         "errors", "fleet_report", "pipeline", "report"], (
        "top-level modules changed: numeric-core modules belong in lti, estimate or assess "
        "(a new top-level module also needs a place in LAYERS)"
    )


def test_every_module_has_a_layer():
    for module in MODULES:
        _layer(module)


def _upward(graph: dict[str, set[str]]) -> list[str]:
    return [
        f"{module} ({LAYERS[_layer(module)][0]}) imports {target} ({LAYERS[_layer(target)][0]})"
        for module, targets in sorted(graph.items())
        for target in sorted(targets)
        if _layer(target) > _layer(module)
    ]


def test_imports_run_down_the_layers():
    upward = _upward(GRAPH)
    assert not upward, "imports against the layer order:\n" + "\n".join(upward)


def test_the_layer_check_finds_upward_imports():
    # the package itself is the base layer, its sub-packages are not
    assert [_layer(m) for m in ("ident", "ident.errors", "ident.lti.models", "ident.assess.modes",
                                "ident.estimate.arx", "ident.io.log", "ident.report", "ident.pipeline",
                                "ident.cli.fit_cmd")] == [0, 0, 1, 2, 3, 4, 4, 5, 6]
    graph = {"ident.lti.analysis": {"ident.estimate.identify", "ident.errors"},
             "ident.estimate.identify": {"ident.lti.analysis"}}
    assert _upward(graph) == ["ident.lti.analysis (lti) imports ident.estimate.identify (estimate)"]


def test_no_import_loops():
    loops = _cycles(GRAPH)
    assert not loops, "import loops:\n" + "\n".join(
        " -> ".join(loop) + (f" (modules in the knot: {', '.join(knot)})" if len(knot) + 1 > len(loop) else "")
        for loop, knot in loops
    )


def test_the_loop_finder_finds_loops():
    # the checks above must be able to fail: a two-module and a three-module loop
    graph = {"a": {"b"}, "b": {"a"}, "c": {"d"}, "d": {"e"}, "e": {"c", "a"}, "f": set()}
    loops = sorted(loop for loop, _ in _cycles(graph))
    assert loops == [["a", "b", "a"], ["c", "d", "e", "c"]]


def test_import_graph_sees_function_level_imports():
    # ARX estimates delays through the delay module (one way only) and is scored by
    # assess.diagnostics, which it imports inside a function
    assert "ident.estimate.delay" in GRAPH["ident.estimate.arx"]
    assert "ident.assess.diagnostics" in GRAPH["ident.estimate.arx"]
    assert "ident.estimate.arx" not in GRAPH["ident.estimate.delay"]
    assert "ident.lti.convert" not in GRAPH["ident.lti.realization"]


def _function_lengths(path: Path):
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            body = node.body
            if isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant) \
                    and isinstance(body[0].value.value, str):
                body = body[1:]  # the docstring does not count
            if body:
                yield node.name, node.lineno, body[-1].end_lineno - body[0].lineno + 1


def test_core_functions_fit_on_a_screen():
    long = [
        f"{path.relative_to(PACKAGE.parent)}:{line} {name} has {length} lines"
        for path in LENGTH_RULE_FILES
        for name, line, length in _function_lengths(path)
        if length > MAX_FUNCTION_LINES
    ]
    assert not long, (
        f"functions longer than {MAX_FUNCTION_LINES} lines (docstring excluded); split them "
        "into named steps:\n" + "\n".join(long)
    )


@pytest.mark.parametrize("package", CORE_PACKAGES)
def test_core_package_init_says_what_lives_there_and_imports_nothing(package):
    path = PACKAGE / package / "__init__.py"
    tree = ast.parse(path.read_text(encoding="utf-8"))
    doc = ast.get_docstring(tree)
    assert doc and "import" in doc, f"ident/{package}/__init__.py needs a docstring saying what it may import"
    imports = [n for n in ast.walk(tree) if isinstance(n, (ast.Import, ast.ImportFrom))]
    assert not imports, f"ident/{package}/__init__.py imports something; keep sub-package imports cheap"


def test_core_does_not_import_io_cli_or_plotting():
    code = (
        "import sys\n"
        + "".join(f"import {m}\n" for m in CORE_MODULES)
        + "bad = [m for m in ('click', 'matplotlib', 'pandas') if m in sys.modules]\n"
        + "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_help_does_not_load_numeric_stack():
    code = (
        "import sys\n"
        "from ident.cli import cli\n"
        "try:\n"
        "    cli.main(['--help'], standalone_mode=False)\n"
        "except SystemExit:\n"
        "    pass\n"
        "print('LOADED:' + ','.join(m for m in ('numpy', 'scipy', 'matplotlib', 'pandas') if m in sys.modules))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert "Commands:" in out.stdout
    assert out.stdout.strip().splitlines()[-1] == "LOADED:"


@pytest.mark.parametrize("module", CORE_MODULES)
def test_core_module_exports_are_declared(module):
    mod = __import__(module, fromlist=["__all__"])
    assert hasattr(mod, "__all__") and mod.__all__
    for name in mod.__all__:
        assert hasattr(mod, name), f"{module}.__all__ names missing {name}"


def test_python_dash_m_runs_the_cli():
    out = subprocess.run([sys.executable, "-m", "ident", "--version"], capture_output=True, text=True)
    assert out.returncode == 0 and "rigfit" in out.stdout


def test_internal_error_exit_1_without_traceback(monkeypatch, capsys):
    import click

    from ident.cli import _common

    @click.command()
    def boom():
        raise RuntimeError("unexpected")

    status = _common.run_guarded(boom, [])
    err = capsys.readouterr().err
    assert status == 1
    assert "internal error" in err and "--debug" in err and "Traceback" not in err


def test_usage_errors_are_one_error_line(run_cli):
    result = run_cli("modes")  # missing argument
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert lines[0] == "error: Missing argument 'MODEL'."
    assert lines[1:] == ["hint: see 'cli modes --help'"]
    assert "Usage:" not in result.stderr
