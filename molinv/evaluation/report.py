"""A learning-curve report a chemist can read: CSV tables, PNG plots and one HTML page."""

from __future__ import annotations

import html
import math
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd

from molinv.molecules.units import convert_energy
from molinv.outputs import written_atomically

from .curves import CurveRun, PowerLaw, fit_power_law, summarize

CAUTION = (
    "Predictions are statistical estimates. They are not a substitute for validated quantum-chemical "
    "calculations, experiments, local regulations or expert review."
)


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")  # files only, no screen
    import matplotlib.pyplot as plt

    return plt


def save_figure(figure, path: Path) -> None:
    """Write ``figure`` as a PNG file, whole or not at all, and free it."""
    with written_atomically(path) as temporary:
        figure.savefig(temporary, dpi=120, format="png")
    _pyplot().close(figure)


def plot_learning_curves(summary: pd.DataFrame, fits: dict[str, PowerLaw], unit: str, target: float | None, path: Path):
    plt = _pyplot()
    figure, axes = plt.subplots(figsize=(6, 4.5))
    for label, rows in summary.groupby("label"):
        line = axes.errorbar(rows["size"], rows[f"mae_mean_{unit}"], yerr=rows[f"mae_std_{unit}"].fillna(0), marker="o",
                             capsize=3, label=f"{label} (slope {fits[label].slope:.2f})" if label in fits else label)
        if label in fits:
            fit = fits[label]
            sizes = np.geomspace(min(fit.sizes_used), max(fit.sizes_used), 20)
            axes.plot(sizes, [convert_energy(fit.mae_at(s), "eV", unit) for s in sizes], ":",
                      color=line[0].get_color())
    if target is not None:
        axes.axhline(target, color="grey", linestyle="--", linewidth=1, label=f"target {target:g} {unit}")
    axes.set_xscale("log")
    axes.set_yscale("log")
    axes.set_xlabel("training molecules")
    axes.set_ylabel(f"test MAE ({unit})")
    axes.grid(True, which="both", alpha=0.3)
    axes.legend(fontsize=8)
    figure.tight_layout()
    save_figure(figure, path)


def plot_parity_and_errors(reference: np.ndarray, predicted: np.ndarray, n_atoms: np.ndarray, label: str,
                           unit: str, folder: Path) -> list[Path]:
    plt = _pyplot()
    errors = predicted - reference
    paths = []
    figure, axes = plt.subplots(figsize=(4.8, 4.5))
    axes.scatter(reference, predicted, s=4, alpha=0.5)
    low, high = float(min(reference.min(), predicted.min())), float(max(reference.max(), predicted.max()))
    axes.plot([low, high], [low, high], "k-", linewidth=0.8)
    axes.set_xlabel(f"reference ({unit})")
    axes.set_ylabel(f"predicted ({unit})")
    axes.set_title(label, fontsize=9)
    figure.tight_layout()
    paths.append(folder / "parity.png")
    save_figure(figure, paths[-1])

    figure, axes = plt.subplots(figsize=(4.8, 3.6))
    axes.hist(errors, bins=60)
    axes.set_xlabel(f"predicted - reference ({unit})")
    axes.set_ylabel("test molecules")
    figure.tight_layout()
    paths.append(folder / "error_histogram.png")
    save_figure(figure, paths[-1])

    figure, axes = plt.subplots(figsize=(4.8, 3.6))
    table = pd.DataFrame({"n_atoms": n_atoms, "abs_error": np.abs(errors)}).groupby("n_atoms")["abs_error"].mean()
    axes.bar(table.index, table.to_numpy())
    axes.set_xlabel("atoms in the molecule")
    axes.set_ylabel(f"MAE ({unit})")
    figure.tight_layout()
    paths.append(folder / "errors_by_size.png")
    save_figure(figure, paths[-1])
    return paths


def write_report(
    run: CurveRun,
    folder,
    *,
    unit: str = "kcal/mol",
    target: float | None = 1.0,
    n_atoms: np.ndarray | None = None,
    settings: dict | None = None,
    data_citation: str = "",
    title: str = "molinv learning curves",
) -> Path:
    """Write points.csv, summary.csv, the plots and report.html; return the HTML path.

    ``target`` is the accuracy wanted, in ``unit``; ``n_atoms`` (one per molecule
    of the run) gives the errors-by-size plot.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    points = run.points()
    if points.empty:
        raise ValueError(f"{run.folder} has no finished points to report")
    table = points.copy()
    for column in ("mae", "rmse", "max_error"):
        table[f"{column}_{unit}"] = convert_energy(table.pop(column).to_numpy(), "eV", unit)
    table["hyperparameters"] = table["hyperparameters"].map(lambda h: ";".join(f"{k}={v}" for k, v in h.items()))
    with written_atomically(folder / "points.csv") as temporary:
        table.to_csv(temporary, index=False)
    summary = summarize(points, unit)
    with written_atomically(folder / "summary.csv") as temporary:
        summary.to_csv(temporary, index=False)

    fits, rows = {}, []
    for label, label_points in points.groupby("label"):
        if label_points["size"].nunique() < 2:
            continue
        fit = fit_power_law(label_points)
        fits[label] = fit
        known_error = not math.isnan(fit.slope_std)
        row = {"model": label,
               "slope": f"{fit.slope:.3f} ± {fit.slope_std:.3f}" if known_error else f"{fit.slope:.3f} (two points, no error)",
               "fitted sizes": ", ".join(map(str, fit.sizes_used))}
        if target is not None:
            needed = fit.size_for(convert_energy(target, unit, "eV"))
            low, high = fit.size_range_for(convert_energy(target, unit, "eV"))
            row[f"N for {target:g} {unit}"] = _size_cell(needed, low, high, known_error)
        rows.append(row)
    plot_learning_curves(summary, fits, unit, target, folder / "learning_curve.png")

    best_label = summary.loc[summary["size"] == summary["size"].max()].sort_values(f"mae_mean_{unit}").iloc[0]["label"]
    largest = int(points.loc[points["label"] == best_label, "size"].max())
    reference = convert_energy(run.y[run.test], "eV", unit)
    predicted = convert_energy(run.predictions(best_label, largest, 0), "eV", unit)
    atoms_per_molecule = np.asarray(n_atoms)[run.test] if n_atoms is not None else np.zeros(len(run.test), int)
    plot_parity_and_errors(reference, predicted, atoms_per_molecule, f"{best_label}, {largest} training molecules",
                           unit, folder)
    page = _html_page(title, summary, pd.DataFrame(rows), settings or {}, data_citation, unit, best_label, largest,
                      len(run.test))
    with written_atomically(folder / "report.html") as temporary:
        temporary.write_text(page)
    return folder / "report.html"


#: Extrapolations beyond this are reported as such, not as a number (the whole of
#: chemical space in QM9's range is about 1e9 molecules; common practice, no source).
_LARGEST_SIZE_SHOWN = 1e9


def _size_text(size: float) -> str:
    if math.isinf(size):
        return "never"
    if size > _LARGEST_SIZE_SHOWN:
        return "more than 1e9"
    return f"{size:,.0f}"


def _size_cell(needed: float, low: float, high: float, known_error: bool) -> str:
    """The training size needed, its range, and what an unreachable size means, as one phrase:
    '2,400 (range 1,900 to 3,100)', 'more than 1e9 (range 5,000,000 to never; the curve is nearly flat)'."""
    notes = [f"range {_size_text(low)} to {_size_text(high)}" if known_error else "range unknown"]
    if math.isinf(needed):
        notes.append("the curve is not falling")
    elif needed > _LARGEST_SIZE_SHOWN:
        notes.append("the curve is nearly flat")
    return f"{_size_text(needed)} ({'; '.join(notes)})"


def _html_page(title, summary, extrapolation, settings, citation, unit, best_label, largest, n_test) -> str:
    shown = summary.copy()
    for column in shown.columns:
        if shown[column].dtype.kind == "f":
            shown[column] = shown[column].map(lambda v: "" if pd.isna(v) else f"{v:.3f}")
    settings_rows = "".join(f"<tr><th>{html.escape(str(k))}</th><td>{html.escape(str(v))}</td></tr>"
                            for k, v in settings.items())
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{html.escape(title)}</title>
<style>body{{font-family:sans-serif;max-width:60em;margin:2em auto;}} table{{border-collapse:collapse;}}
td,th{{border:1px solid #ccc;padding:2px 6px;font-size:90%;}} .caution{{background:#fff3cd;padding:.6em;}}</style>
</head><body>
<h1>{html.escape(title)}</h1>
<p class="caution"><b>Caution.</b> {html.escape(CAUTION)}</p>
<h2>Learning curves</h2>
<p>Errors on a fixed held-out test set of {n_test} molecules, never trained on; mean and standard deviation
over random training draws; units: {html.escape(unit)}. Dotted lines: power-law fit of the largest sizes.</p>
<img src="learning_curve.png" alt="learning curve">
<h3>How many reference calculations for the target accuracy</h3>
{extrapolation.to_html(index=False, escape=True)}
<p>Extrapolations assume the fitted power law continues; curves often flatten, so treat the sizes as lower bounds.</p>
<h3>Every size</h3>
{shown.to_html(index=False, escape=True)}
<h2>Errors of {html.escape(str(best_label))} at {largest} training molecules</h2>
<img src="parity.png" alt="parity plot"> <img src="error_histogram.png" alt="error histogram">
<img src="errors_by_size.png" alt="errors by molecule size">
<h2>Settings</h2><table>{settings_rows}</table>
<h2>Data</h2><p>{html.escape(citation)}</p>
<p>Files: points.csv (every fit), summary.csv (per size).</p>
</body></html>
"""
