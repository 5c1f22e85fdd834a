"""Predictions for candidate molecules as one table: every input row once, with a status.

Statuses: ``ok``; ``flagged`` (predicted, but the reason says why to distrust
it: far from every training molecule, chemistry no training molecule showed (see
:mod:`molinv.screening.coverage`), or a name already used by an earlier row);
``failed`` (not predicted: unreadable record, an element the model was not trained
on, or a charge/spin state it was not trained on: no descriptor here sees charge or
spin, so the number would belong to another species). Candidates are first brought onto the model's geometry route
(:meth:`~molinv.recipes.EnergyModel.onto_route`): a model trained on geometries made
from SMILES embeds candidates given with coordinates anew from their SMILES, and a
model trained on coordinates from files flags candidates embedded from SMILES.
"""

from __future__ import annotations

import re
from typing import Sequence

import numpy as np
import pandas as pd
from ase import Atoms
from ase.data import chemical_symbols

from molinv.descriptors.base import DescriptorError
from molinv.molecules.checks import MoleculeError, Rejected, check_geometry, shorten
from molinv.molecules.electrons import CHARGE, MULTIPLICITY, electronic_state
from molinv.molecules.embedding import formula_of_smiles
from molinv.molecules.reading import MAX_SMILES_CHARACTERS
from molinv.molecules.units import convert_energy

from .ranking import finish_ranking, whole_numbers
from .spreadsheet import INPUT_PREFIX

CAUTION = (
    "Predictions are statistical estimates, not a substitute for validated quantum-chemical calculations, "
    "local regulations or expert review."
)

COLUMNS = ["record", "name", "smiles", "formula", "n_atoms", "charge", "multiplicity", "geometry_source", "status",
           "reason"]
#: Properties that molinv reads into columns of its own (or sets itself): not passed through.
OWN_PROPERTIES = ("name", "record", "source", "smiles", "geometry_source", CHARGE, MULTIPLICITY)


def input_cells(properties: dict, energy_keys: Sequence[str]) -> dict:
    """The scalar properties an input file gave a record, as ``input_<property>`` cells: the
    columns of a CSV row other than its SMILES, name, charge, multiplicity and energies, the
    data fields of an SDF record, the comment-line fields of an extended-XYZ frame. Energies
    (``energy_keys``) are left out: reading converted them to eV, and ``predict`` compares them
    with the predictions in columns of their own."""
    cells = {}
    for key, value in properties.items():
        value = value.item() if isinstance(value, np.generic) else value
        if key not in OWN_PROPERTIES and key not in energy_keys and isinstance(value, (bool, int, float, str)):
            cells[INPUT_PREFIX + key] = value
    return cells


def describable(descriptor, atoms: Atoms) -> str:
    """Why the fitted descriptor cannot describe this molecule ('' when it can): an element
    outside the training set, or more atoms or bond-bag entries than its fitted padding."""
    extra = sorted(set(int(z) for z in atoms.numbers) - set(descriptor.elements_))
    if extra:
        return "elements not in the training set: " + ", ".join(chemical_symbols[z] for z in extra)
    try:
        descriptor._check_elements([atoms])
    except DescriptorError as error:
        # The message counts positions within the one-molecule list checked here; drop that.
        return re.sub(r" \(position 0\)| at position 0", "", str(error))
    return ""


def stated_state(atoms: Atoms) -> dict:
    """The molecule's charge and multiplicity as table cells (empty where they cannot describe
    its electrons: the refusal says why)."""
    try:
        charge, multiplicity = electronic_state(atoms)
    except MoleculeError:
        return {"charge": np.nan, "multiplicity": np.nan}
    return {"charge": charge, "multiplicity": multiplicity}


def prediction_table(model, molecules: Sequence[Atoms], rejected: Sequence[Rejected] = (), unit: str = "kcal/mol",
                     target: str = "energy", rank: bool = True, energy_keys: Sequence[str] = ("energy",)) -> pd.DataFrame:
    """Predictions of a fitted :class:`~molinv.recipes.EnergyModel`, one row per input record.

    Columns: record, name, smiles, formula, n_atoms, geometry_source, status,
    reason, ``<target>_<unit>``, ``std_<unit>`` (calibrated standard deviation),
    ``domain_distance`` (to the nearest training molecule, in units of the
    training set's own threshold: above 1 is flagged; see
    :class:`~molinv.screening.applicability.ApplicabilityCheck`), the input file's own
    properties (:func:`input_cells`; of molecules read from a file, ``info['source']``),
    and with ``rank`` the columns of :func:`finish_ranking`. Rejected records keep the
    SMILES, and the formula it gives, where the input gave one.
    """
    rows, passed, usable, route_flags = [], [], [], {}
    molecules, route_notes = model.onto_route(molecules)
    for atoms, route_note in zip(molecules, route_notes):
        row = {"record": atoms.info.get("record"), "name": atoms.info.get("name"),
               "smiles": atoms.info.get("smiles", ""), "formula": atoms.get_chemical_formula(), "n_atoms": len(atoms),
               **stated_state(atoms), "geometry_source": atoms.info.get("geometry_source", "file"), "status": "ok",
               "reason": ""}
        refusal = describable(model.descriptor_, atoms) or model.chemistry_.refusal(atoms)
        if route_note and route_note[0] == "failed":
            row.update(status="failed", reason=route_note[1])
        elif refusal:
            row.update(status="failed", reason=refusal)
        else:
            if route_note:
                route_flags[len(rows)] = route_note[1]
            usable.append(len(rows))
        rows.append(row)
        passed.append(input_cells(atoms.info, energy_keys) if atoms.info.get("source") else {})
    for r in rejected:
        smiles = r.smiles or ""
        rows.append({"record": r.record, "name": r.name, "smiles": smiles,
                     "formula": formula_of_smiles(smiles) if len(smiles) <= MAX_SMILES_CHARACTERS else "",
                     "n_atoms": np.nan, "charge": np.nan, "multiplicity": np.nan, "geometry_source": "",
                     "status": "failed", "reason": r.reason})
        passed.append(input_cells(r.properties, energy_keys))
    table = pd.DataFrame(rows, columns=COLUMNS)
    value_column, std_column = f"{target}_{unit}", f"std_{unit}"
    table[value_column] = np.nan
    table[std_column] = np.nan
    table["domain_distance"] = np.nan
    table = pd.concat([table, pd.DataFrame(passed, index=table.index)], axis=1)
    if usable:
        assessed, failures = assess_apart(model, [molecules[i] for i in usable])
        table.loc[usable, value_column] = convert_energy(assessed["predicted"], "eV", unit)
        table.loc[usable, std_column] = convert_energy(assessed["std"], "eV", unit)
        table.loc[usable, "domain_distance"] = assessed["distance"] / model.applicability_.threshold_
        for row, why, failure in zip(usable, assessed["outside_because"], failures):
            why = "; ".join(reason for reason in (route_flags.get(row, ""), why) if reason)
            if failure:
                table.loc[row, ["status", "reason"]] = ["failed", failure]
            elif why:
                table.loc[row, ["status", "reason"]] = ["flagged", why]
    table = whole_numbers(table.sort_values("record", kind="stable", na_position="last").reset_index(drop=True))
    return finish_ranking(table, unit=unit, target=target) if rank else table


def assess_apart(model, molecules: Sequence[Atoms]) -> tuple[dict[str, np.ndarray], list[str]]:
    """``model.assess(molecules)`` and why each molecule could not be predicted ('' when it
    was): a geometry that fails :func:`check_geometry` (a molecule handed over without
    reading), one the descriptor or regressor refuses, or a prediction that is not finite.
    Failed molecules get NaN values; one failure never stops the others, since when the
    whole batch is refused each molecule is assessed on its own."""
    failures = [""] * len(molecules)
    for i, atoms in enumerate(molecules):
        try:
            check_geometry(atoms)
        except MoleculeError as error:
            failures[i] = shorten(f"geometry: {error}")
    keep = [i for i, failure in enumerate(failures) if not failure]
    columns = {"predicted": np.full(len(molecules), np.nan), "std": np.full(len(molecules), np.nan),
               "distance": np.full(len(molecules), np.nan), "outside_because": [""] * len(molecules)}
    try:
        parts = [(keep, model.assess([molecules[i] for i in keep]))] if keep else []
    except (ValueError, MemoryError, FloatingPointError) as batch_error:  # find the molecules at fault
        parts = []
        for i in keep:
            try:
                parts.append(([i], model.assess([molecules[i]])))
            except (ValueError, MemoryError, FloatingPointError) as error:
                failures[i] = shorten(f"cannot be described or predicted: {error or batch_error}")
    for rows, assessed in parts:
        for key, column in columns.items():
            for row, value in zip(rows, assessed[key]):
                column[row] = value
    for i, value in enumerate(columns["predicted"]):
        if not failures[i] and not np.isfinite(value):
            failures[i] = "the prediction is not finite (is the model file damaged?)"
    for i, failure in enumerate(failures):
        if failure:
            columns["predicted"][i] = columns["std"][i] = np.nan
            columns["outside_because"][i] = ""
    return columns, failures
