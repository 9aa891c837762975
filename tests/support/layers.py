"""The import graph of a package, read with ``ast`` (nothing is imported), and the two rules it must keep.

Rules (the contributor guide, "Layout and layers"):
1. a module imports only from its own topic package or from packages of a lower layer;
2. no two modules import each other, directly or through others (no cycles).

Imports inside functions count (they hide the graph, but are edges all the same); imports
under ``if TYPE_CHECKING:`` are annotations only and do not.
"""

from __future__ import annotations

import ast
from pathlib import Path

#: Topic packages from the lowest layer to the highest; "" is the package root (errors, _version).
LAYERS = ("", "core", "io", "sampling", "estimation", "reference", "lights", "validation", "qa", "reports", "pipeline",
          "synth", "cli")


def module_names(root: Path, package: str) -> dict[str, Path]:
    """Dotted module name -> file, for every ``.py`` file under ``root / package``."""
    out = {}
    for path in sorted((root / package).rglob("*.py")):
        parts = list(path.relative_to(root).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def _type_checking_lines(tree: ast.AST) -> set[int]:
    lines = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            for child in node.body:
                lines.update(range(child.lineno, child.end_lineno + 1))
    return lines


def imports_of(name: str, path: Path, modules: dict[str, Path], package: str) -> set[str]:
    """The package's modules that module ``name`` imports (absolute and relative imports)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    skip = _type_checking_lines(tree)
    is_pkg = path.name == "__init__.py"
    found = set()
    for node in ast.walk(tree):
        if getattr(node, "lineno", None) in skip:
            continue
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = name.split(".") if is_pkg else name.split(".")[:-1]
                base = base[: len(base) - (node.level - 1)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            targets = [f"{mod}.{a.name}" for a in node.names] + [mod]
        else:
            continue
        for t in targets:
            # The longest prefix that is one of the package's modules.
            parts = t.split(".")
            while parts and ".".join(parts) not in modules:
                parts.pop()
            if parts and parts[0] == package:
                target = ".".join(parts)
                if target != name and not name.startswith(target + "."):
                    found.add(target)
    return found


def graph(root: Path, package: str) -> dict[str, set[str]]:
    """Module -> the package's modules it imports."""
    modules = module_names(root, package)
    return {m: imports_of(m, p, modules, package) for m, p in modules.items()}


def layer_of(module: str) -> int:
    parts = module.split(".")
    topic = parts[1] if len(parts) > 2 or (len(parts) == 2 and parts[1] in LAYERS) else ""
    return LAYERS.index(topic) if topic in LAYERS else -1


def layer_violations(edges: dict[str, set[str]], package: str) -> list[str]:
    """``"a -> b"`` for every import of a higher layer (or of a module in no layer)."""
    bad = []
    for src, targets in sorted(edges.items()):
        if src == package:  # the root's lazy export table names every layer on purpose
            continue
        for dst in sorted(targets):
            if dst == package:
                bad.append(f"{src} -> {dst} (import names from their module, not from the package root)")
            elif layer_of(src) < 0 or layer_of(dst) < 0 or layer_of(dst) > layer_of(src):
                bad.append(f"{src} -> {dst}")
    return bad


def cycles(edges: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components of more than one module (Tarjan 1972), each sorted."""
    index, low, stack, on, out = {}, {}, [], set(), []
    counter = [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in edges.get(v, ()):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(edges):
        if v not in index:
            visit(v)
    return sorted(out)


def function_level_imports(root: Path, package: str) -> list[str]:
    """``"module:line"`` of every import of the package's own modules made inside a function.

    Our modules import each other at the top, so the graph is visible in one place;
    heavy third-party modules (scipy, matplotlib, OpenCV, OpenEXR) may still load lazily.
    """
    found = []
    for name, path in module_names(root, package).items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for fn in ast.walk(tree):
            if not isinstance(fn, (ast.FunctionDef, ast.AsyncFunctionDef)):
                continue
            for node in ast.walk(fn):
                if isinstance(node, ast.ImportFrom) and (node.level or (node.module or "").split(".")[0] == package):
                    found.append(f"{name}:{node.lineno}")
                elif isinstance(node, ast.Import) and any(a.name.split(".")[0] == package for a in node.names):
                    found.append(f"{name}:{node.lineno}")
    return sorted(set(found))


#: Modules that need no test file of their own: package markers and the version string.
UNTESTED_NAMES = ("__init__.py", "_version.py")


def modules_without_tests(root: Path, package: str, tests: str = "tests") -> list[str]:
    """Modules ``package/<pkg>/<mod>.py`` with no ``tests/<pkg>/test_<mod>.py`` (the test file that mirrors it),
    as paths relative to ``root``; ``__init__.py`` and ``_version.py`` need none."""
    missing = []
    for path in sorted((root / package).rglob("*.py")):
        if path.name in UNTESTED_NAMES:
            continue
        rel = path.relative_to(root / package)
        if not (root / tests / rel.parent / f"test_{rel.stem}.py").is_file():
            missing.append(str(path.relative_to(root)))
    return missing
