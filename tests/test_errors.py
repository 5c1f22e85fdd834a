"""Every error meant for the user derives from one base class, and the command line catches that one class."""

import importlib
import pkgutil

import pytest

import molinv
from molinv import cli
from molinv.errors import MolinvError


def exception_classes_of_molinv():
    found = []
    for module_info in pkgutil.walk_packages(molinv.__path__, prefix="molinv."):
        try:
            module = importlib.import_module(module_info.name)
        except ImportError as missing:  # an optional dependency (dask, pyscf...) absent here
            pytest.skip(f"{module_info.name} cannot be imported here: {missing}")
        found += [value for value in vars(module).values()
                  if isinstance(value, type) and issubclass(value, BaseException)
                  and value.__module__ == module.__name__ and not issubclass(value, Warning)]
    return found


def test_every_molinv_exception_derives_from_the_one_base():
    classes = exception_classes_of_molinv()
    # The walk must reach the modules that define errors: the reader's and the command line's at least.
    assert {"InputError", "CommandError", "OutputError", "ModelFileError"} <= {cls.__name__ for cls in classes}
    outside = [f"{cls.__module__}.{cls.__name__}" for cls in classes if not issubclass(cls, MolinvError)]
    assert not outside, f"not derived from MolinvError: {outside}"


def test_errors_keep_their_builtin_base():
    from molinv.molecules.reading import InputError
    from molinv.molecules.qm9 import Qm9Unavailable
    from molinv.outputs import OutputError

    assert issubclass(InputError, ValueError)
    assert issubclass(Qm9Unavailable, RuntimeError)
    assert issubclass(OutputError, OSError)


def test_main_reports_any_molinv_error_as_one_line_and_status_2(monkeypatch, tmp_path, capsys):
    class NewKindOfFailure(MolinvError):
        """Stands for an error class added later, which main() must catch without being told of it."""

    def fails(args):
        raise NewKindOfFailure("the candidates file is empty")

    monkeypatch.setattr(cli, "run_demo", fails)
    status = cli.main(["demo", "--out", str(tmp_path / "demo")])
    assert status == 2
    assert capsys.readouterr().err == "molinv demo: error: the candidates file is empty\n"


def test_main_lets_a_bug_through(monkeypatch, tmp_path):
    def fails(args):
        raise ZeroDivisionError("a bug, not a user's mistake")

    monkeypatch.setattr(cli, "run_demo", fails)
    with pytest.raises(ZeroDivisionError):
        cli.main(["demo", "--out", str(tmp_path / "demo")])
