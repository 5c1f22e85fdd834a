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
