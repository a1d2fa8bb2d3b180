"""The package's imports: no cycle, no other module's private name, and no duckdb on the Spark path."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
# the package as installed (pyproject's package-dir): folder -> module prefix
FOLDERS = {ROOT / "tsql": "tsql", ROOT / "sample_db": "tsql.sample_db", ROOT / "sql": "tsql.sql"}


def modules() -> dict[str, Path]:
    found = {}
    for folder, prefix in FOLDERS.items():
        for path in folder.rglob("*.py"):
            parts = list(path.relative_to(folder).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            found[".".join([prefix, *parts])] = path
    return found


def _type_checking_only(node: ast.AST) -> bool:
    return isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test)


def imports(name: str, path: Path, known: dict[str, Path]) -> list[tuple[str, str | None]]:
    """(module, name used from it or None) for every import of the package's own modules, at any depth,
    and every attribute read from a module imported as a whole (``timed._on_grid_udf``)."""
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found = []
    tree = ast.parse(path.read_text(encoding="utf-8"))
    aliases = {}  # local name -> package module bound to it
    stack = list(tree.body)
    while stack:
        node = stack.pop()
        if _type_checking_only(node):
            continue
        stack.extend(ast.iter_child_nodes(node))
        if isinstance(node, ast.Import):
            found += [(a.name, None) for a in node.names if a.name.split(".")[0] == "tsql"]
            aliases.update({a.asname: a.name for a in node.names if a.asname and a.name.split(".")[0] == "tsql"})
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(
                    package.split(".")[: len(package.split(".")) - node.level + 1] + ([base] if base else [])
                )
            if base.split(".")[0] != "tsql":
                continue
            for alias in node.names:
                child = f"{base}.{alias.name}"
                found.append((child, None) if child in known else (base, alias.name))
                if child in known:
                    aliases[alias.asname or alias.name] = child
    for node in ast.walk(tree):
        if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id in aliases:
            found.append((aliases[node.value.id], node.attr))
    return found


def graph() -> tuple[dict[str, set[str]], list[str]]:
    known = modules()
    edges: dict[str, set[str]] = {m: set() for m in known}
    private = []
    for name, path in known.items():
        for target, imported in imports(name, path, known):
            edges[name].add(target)
            if imported and imported.startswith("_") and not imported.startswith("__"):
                private.append(f"{name} imports {target}.{imported}")
    return edges, private


def cycles(edges: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components of more than one module (or a module importing itself)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    found = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        for w in edges.get(v, ()):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                component.append(w)
                if w == v:
                    break
            if len(component) > 1 or v in edges.get(v, ()):
                found.append(sorted(component))

    for v in list(edges):
        if v not in index:
            visit(v)
    return found


def test_the_walk_sees_the_package():
    edges, _ = graph()
    assert "tsql.forms.agg" in edges["tsql.binding"] and "tsql.registry" in edges["tsql.forms.agg"]
    assert "tsql.binding" in edges["tsql"]  # an import inside a function counts


def test_the_walk_finds_a_cycle_and_a_private_name(tmp_path):
    assert cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    module = tmp_path / "x.py"
    module.write_text(
        "from tsql.binding import _clock\nfrom tsql.forms import agg\n\ndef f():\n    return agg._hidden\n"
    )
    known = {"tsql.x": module, "tsql.binding": module, "tsql.forms.agg": module}
    found = imports("tsql.x", module, known)
    assert ("tsql.binding", "_clock") in found and ("tsql.forms.agg", "_hidden") in found


def test_no_import_cycles():
    assert cycles(graph()[0]) == []


def test_no_module_imports_another_modules_private_name():
    assert graph()[1] == []


def test_the_spark_host_never_imports_duckdb():
    # the Spark UDFs called as Spark's workers call them, in a fresh interpreter
    script = """
import sys, datetime as dt
import pyarrow as pa
import tsql.spark
from tsql.registry import BY_NAME
days = pa.array([dt.date(2024, 1, 1) + dt.timedelta(days=d) for d in range(12)])
steps = pa.array([5, 6, 5, 6, 5, 6, 12, 13, 12, 13, 12, 13])
assert tsql.spark._agg_udf(BY_NAME["change_points"], "date")(steps, days).as_py() == [dt.date(2024, 1, 7)]
assert tsql.spark._agg_udf(BY_NAME["dominant_period"], "date")(steps, days, step=pa.array(["1 day"] * 12)).is_valid
assert tsql.spark._list_udf(BY_NAME["acf"])(pa.array([[1.0, 2.0, 1.0, 2.0]])).to_pylist()[0][0] == -0.75
print(sorted(m for m in sys.modules if m.split(".")[0] == "duckdb"))
"""
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, cwd=ROOT, timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[]"
