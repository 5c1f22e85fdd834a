"""The demo candidates are package data, so ``molinv demo`` works from an installed wheel, not only from a checkout."""

import fnmatch
import tomllib
from importlib import resources
from pathlib import Path

from molinv.cli import DEMO_DATA, build_parser
from molinv.molecules import read_molecules

ROOT = Path(__file__).resolve().parent.parent


def test_demo_candidates_are_found_through_the_package():
    packaged = resources.files("molinv.demo_data") / "candidates.csv"
    assert packaged.is_file()
    assert DEMO_DATA.samefile(str(packaged))
    assert build_parser().parse_args(["demo"]).candidates == DEMO_DATA
    assert read_molecules(DEMO_DATA).molecules, "the demo candidates read as no molecule"


def test_every_demo_file_is_declared_as_package_data():
    # setuptools copies into a wheel only the non-Python files that [tool.setuptools.package-data] names.
    declared = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["package-data"]
    patterns = declared["molinv.demo_data"]
    shipped = [path.name for path in (ROOT / "molinv" / "demo_data").iterdir()
               if path.is_file() and path.suffix not in (".py", ".pyc")]
    assert "candidates.csv" in shipped
    left_out = [name for name in shipped if not any(fnmatch.fnmatch(name, pattern) for pattern in patterns)]
    assert not left_out, f"not in the wheel: {left_out}"
