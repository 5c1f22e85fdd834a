"""The package's layers, as DEVELOPERS.md draws them: a module imports only from its own part or the parts below.

Imports inside functions count too: they are lazy, not exempt.
"""

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "molinv"

#: Lowest first; the same order as the table in DEVELOPERS.md.
LAYERS = ["demo_data", "errors", "outputs", "cluster", "molecules", "descriptors", "models", "evaluation", "screening", "recipes",
          "labels", "cli"]


def part_of(module: str) -> str:
    """'molinv.molecules.reading' -> 'molecules'; 'molinv.recipes' -> 'recipes'."""
    return module.split(".")[1]


def imports_of(path: Path) -> list[tuple[int, str]]:
    module = ".".join(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    package = module if path.name == "__init__.py" else module.rsplit(".", 1)[0]
    found = []
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                found.append((node.lineno, ".".join(base + ([node.module] if node.module else []))))
            else:
                found.append((node.lineno, node.module or ""))
        elif isinstance(node, ast.Import):
            found += [(node.lineno, alias.name) for alias in node.names]
    return [(line, name) for line, name in found if name.startswith("molinv.")]


def test_every_part_is_in_the_table():
    parts = {path.stem if path.is_file() else path.name for path in PACKAGE.iterdir()
             if (path.suffix == ".py" and path.name != "__init__.py") or (path / "__init__.py").is_file()}
    assert parts == set(LAYERS)


def test_no_import_climbs_a_layer():
    climbing = []
    for path in sorted(PACKAGE.rglob("*.py")):
        relative = path.relative_to(PACKAGE)
        if relative.parts[0] == "__init__.py":
            continue
        here = LAYERS.index(relative.parts[0].removesuffix(".py"))
        for line, name in imports_of(path):
            if name != "molinv" and LAYERS.index(part_of(name)) > here:
                climbing.append(f"molinv/{relative}:{line} imports {name}")
    assert not climbing, "\n".join(climbing)


def module_name(path: Path) -> str:
    return ".".join(path.relative_to(PACKAGE.parent).with_suffix("").parts)


def module_imports(path: Path) -> set[str]:
    """The molinv modules (files, not packages) that ``path`` imports, anywhere in it."""
    package = module_name(path).rsplit(".", 1)[0] if path.name != "__init__.py" else module_name(path)[:-9]
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            base = package.split(".")[: len(package.split(".")) - node.level + 1] if node.level else []
            target = ".".join(base + ([node.module] if node.module else []))
            found |= {f"{target}.{alias.name}" for alias in node.names} | {target}
        elif isinstance(node, ast.Import):
            found |= {alias.name for alias in node.names}
    files = {module_name(p) for p in PACKAGE.rglob("*.py") if p.name != "__init__.py"}
    return found & files


def test_no_two_modules_import_each_other():
    # Packages' __init__ files are left out: they gather their modules' names, and a module may
    # import its own package to have every class registered (descriptors.base does).
    graph = {module_name(p): module_imports(p) for p in PACKAGE.rglob("*.py") if p.name != "__init__.py"}
    circles = []

    def visit(module, path):
        for target in sorted(graph.get(module, ())):
            if target == path[0]:
                circles.append(" -> ".join(path + [target]))
            elif target not in path and target > path[0]:  # each circle once, from its smallest module
                visit(target, path + [target])

    for start in sorted(graph):
        visit(start, [start])
    assert not circles, "\n".join(circles)
