"""Predictions against reference values that the input carries: error and interval coverage.

When the molecules given to ``predict`` hold the model's target (QM9 samples, a labels
file written by ``molinv label``), the table gains the reference and the error, and the
report says how large the error is on ``ok`` and on ``flagged`` rows and how often the
reference lies inside the predicted central interval (the calibrated standard deviation
times the normal quantile of the model's ``interval_level``: 1.645 for 90%). Only useful
for molecules the model was not trained on.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.stats import norm

from molinv.molecules.units import convert_energy


def compare_with_references(table: pd.DataFrame, molecules, key: str, target: str, unit: str,
                            level: float = 0.9) -> tuple[pd.DataFrame, list[str]]:
    """``table`` with ``reference_<target>_<unit>`` and ``error_<unit>`` (predicted minus reference)
    for the molecules whose ``info[key]`` (eV) is known, matched by record; and report lines
    (none when no molecule holds a reference)."""
    references = {atoms.info.get("record"): atoms.info[key] for atoms in molecules
                  if key in atoms.info and np.isfinite(atoms.info[key])}
    if not references:
        return table, []
    reference_column, error_column = f"reference_{target}_{unit}", f"error_{unit}"
    table = table.copy()
    table[reference_column] = convert_energy(table["record"].map(references).astype(float).to_numpy(), "eV", unit)
    table[error_column] = table[f"{target}_{unit}"] - table[reference_column]
    known = table[table[error_column].notna()]
    lines = [f"held-out error against {key} in the input ({len(known)} of {len(table)} rows with a reference and "
             "a prediction):"]
    for status in ("ok", "flagged"):
        rows = known[known["status"] == status]
        if len(rows):
            lines.append(f"  {status} rows ({len(rows)}): MAE {rows[error_column].abs().mean():.3g} {unit}, "
                         f"largest {rows[error_column].abs().max():.3g} {unit}")
    std = known[f"std_{unit}"]
    if std.notna().any():
        z = norm.ppf(0.5 + level / 2)
        inside = (known[error_column].abs() <= z * std)[std.notna()]
        lines.append(f"  references inside the predicted {level:.0%} interval (+-{z:.3f} std): {inside.mean():.0%} "
                     f"of {len(inside)} (calibrated for {level:.0%})")
    return table, lines
