"""What the user reads: defaults in --help, CLI words in messages and progress bars, report sentences."""

import math

import pytest

from molinv.cli import build_parser
from molinv.descriptors.base import DescriptorError
from molinv.evaluation.report import _size_cell
from molinv.molecules import embed_smiles
from molinv.recipes import make_descriptor


@pytest.mark.parametrize("verb", ["fit", "describe"])
def test_help_states_the_defaults(verb, capsys):
    with pytest.raises(SystemExit):
        build_parser().parse_args([verb, "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "default atoms." in text and "default kernel." in text


def test_size_messages_name_no_python_parameter_first():
    descriptor = make_descriptor("bonds").fit([embed_smiles("CCO")])
    with pytest.raises(DescriptorError) as error:
        descriptor.transform([embed_smiles("CCCCO")])
    message = str(error.value)
    assert "refit with molecules this large among the training molecules" in message
    assert not message.split("(in Python")[0].count("bag_sizes")


def test_unreachable_sizes_read_as_one_phrase():
    assert _size_cell(2.0e10, 5.0e6, math.inf, True) == "more than 1e9 (range 5,000,000 to never; the curve is nearly flat)"
    assert _size_cell(math.inf, math.inf, math.inf, False) == "never (range unknown; the curve is not falling)"
    assert _size_cell(2400.0, 1900.0, 3100.0, True) == "2,400 (range 1,900 to 3,100)"


def test_a_missing_smiles_column_names_the_option(tmp_path):
    from molinv.molecules import read_molecules
    from molinv.molecules.reading import InputError

    table = tmp_path / "mine.csv"
    table.write_text("name,structure\nethanol,CCO\n")
    with pytest.raises(InputError) as error:
        read_molecules(table)
    assert str(error.value).split("(")[0].endswith("name it with --smiles-column ")


def test_describing_in_chunks_shows_no_class_name(tmp_path, qm9_sample, capsys):
    from molinv.descriptors.store import describe_in_chunks

    descriptor = make_descriptor("counts").fit(qm9_sample)
    describe_in_chunks(descriptor, qm9_sample[:5], tmp_path / "chunks", progress=True)
    shown = capsys.readouterr().err
    assert "describe molecules" in shown and type(descriptor).__name__ not in shown
