"""The ``molinv`` command: a thin shell over the library.

Every verb reports errors as one line on stderr and exits with status 2 for bad
input, 1 for other failures.
"""

from __future__ import annotations

import argparse
import signal
import sys
from importlib import resources
from pathlib import Path

# Native thread pools (OpenBLAS starts its pool when numpy is imported) inherit the signal
# mask of the thread that starts them. Started with SIGINT held, they never take a Ctrl-C,
# so molinv.molecules.reading can hold it in the main thread while RDKit embeds: RDKit's
# own SIGINT handler would otherwise take it in a pool thread and lose it (6 of 40).
_HOLD_SIGINT = hasattr(signal, "pthread_sigmask")
_mask_before_imports = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT}) if _HOLD_SIGINT else None
from .errors import MolinvError  # noqa: E402
from .molecules.units import ENERGY_UNITS, LENGTH_UNITS  # noqa: E402
from .outputs import check_writable, written_atomically  # noqa: E402

if _HOLD_SIGINT:
    signal.pthread_sigmask(signal.SIG_SETMASK, _mask_before_imports)
    # tqdm's monitor thread would start with the first progress bar, not holding SIGINT.
    from tqdm import tqdm as _tqdm  # noqa: E402

    _tqdm.monitor_interval = 0

UNITS_HELP = (
    "Internal units are eV and Angstrom. Lengths in input files: "
    + ", ".join(LENGTH_UNITS)
    + "; energies: "
    + ", ".join(ENERGY_UNITS)
    + "."
)


class CommandError(MolinvError):
    """A user-facing failure: printed as one line, no traceback."""


def add_input_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("input", help="molecules: .xyz/.extxyz, .sdf/.mol, .smi (SMILES name), .csv (SMILES column); "
                        "or qm9:N[:SEED] for a random QM9 sample (qm9 alone: all of it)")
    parser.add_argument("--format", dest="file_format", choices=["xyz", "sdf", "smiles", "csv"], help="override the guess from the file suffix")
    parser.add_argument("--length-unit", default="Angstrom", help="unit of coordinates in the file (default Angstrom)")
    parser.add_argument("--energy-unit", default="eV", help="unit of energies in the file (default eV)")
    parser.add_argument("--energy-key", default=None,
                        help="property holding the energy (default 'energy'; for QM9 'atomization_energy', "
                             "positive, from U0; also U0, U, H, G, ZPVE, HOMO, LUMO, gap)")
    parser.add_argument("--smiles-column", help="CSV column with SMILES (default: a column named 'smiles')")
    parser.add_argument("--name-column", help="CSV column with names (default: 'name' or 'id')")


def parse_qm9_source(text: str):
    """'qm9', 'qm9:N' or 'qm9:N:SEED' -> (n or None, seed); None when not a QM9 source."""
    parts = text.split(":")
    if parts[0].lower() != "qm9":
        return None
    try:
        n = int(parts[1]) if len(parts) > 1 and parts[1] else None
        seed = int(parts[2]) if len(parts) > 2 else 0
    except ValueError:
        raise CommandError(f"cannot read {text!r}: write qm9, qm9:N or qm9:N:SEED") from None
    return n, seed


def energy_key(args) -> str:
    if args.energy_key:
        return args.energy_key
    return "atomization_energy" if parse_qm9_source(args.input) else "energy"


def read_input(args, require_energy: bool, runner=None, folder: Path | None = None):
    """Molecules of the input argument, as a ReadResult (energies in eV). With ``runner``
    (an executor), a file's records are built (SMILES embedded) there, chunks kept in ``folder``."""
    from .molecules import ReadResult, read_molecules
    from .molecules.packed import read_in_chunks

    qm9 = parse_qm9_source(args.input)
    if qm9 is not None:
        from .molecules.qm9 import CITATION, load_qm9

        molecules = load_qm9(n=qm9[0], seed=qm9[1])
        key = energy_key(args)
        if key not in molecules[0].info:
            raise CommandError(f"QM9 has no property {key!r}")
        for number, atoms in enumerate(molecules, start=1):
            atoms.info["energy"] = atoms.info[key]
            atoms.info["record"] = number  # as for file records: the position in the input, from 1
        return ReadResult(source=f"QM9 ({CITATION})", molecules=molecules)
    options = dict(file_format=args.file_format, length=args.length_unit, energy=args.energy_unit,
                   energy_keys=(energy_key(args),), require_energy=require_energy,
                   smiles_column=args.smiles_column, name_column=args.name_column)
    if runner is not None:
        return read_in_chunks(Path(args.input), folder, executor=runner, progress=True, **options)
    return read_molecules(Path(args.input), progress=True, **options)


ROUTE_HELP = ("geometries the model learns from: 'embed' makes each one from the molecule's SMILES (given, or "
              "perceived from the coordinates) as candidates given as SMILES are made, the route for screening "
              "SMILES; 'file' uses the input's coordinates as they are (for example DFT geometries; candidates must "
              "then come with geometries of the same kind, others are flagged). Default 'auto': embed for QM9 and "
              "SMILES inputs, file for coordinate files")


def add_route_options(parser) -> None:
    parser.add_argument("--route", choices=["auto", "embed", "file"], default="auto", help=ROUTE_HELP)
    parser.add_argument("--geometry-level", metavar="TEXT",
                        help="how the input's coordinates were computed (for example 'B3LYP/6-31G(2df,p)'), recorded "
                             "in the model with route 'file'")


def on_route(args, result):
    """The read molecules on the geometry route asked for (``--route``); those that cannot be
    brought there join the rejected records with the reason."""
    from .molecules import ReadResult, Rejected
    from .molecules.route import onto_embedded_route, route_of

    route = args.route
    if route == "auto":
        route = "embed" if parse_qm9_source(args.input) else "as read"
    if route == "file":
        embedded = sum(route_of(atoms) == "embedded" for atoms in result.molecules)
        if embedded:
            raise CommandError(f"--route file: {embedded} molecules have no coordinates in the input (SMILES); "
                               "they can only be embedded (--route embed)")
    if route != "embed":
        return result
    moved = onto_embedded_route(result.molecules, n_jobs=args.jobs, progress=True)
    kept = [item for item in moved if not isinstance(item, str)]
    refused = [Rejected(source=result.source, record=atoms.info.get("record"), line=None,
                        name=atoms.info.get("name"), reason=item, smiles=atoms.info.get("smiles"))
               for atoms, item in zip(result.molecules, moved) if isinstance(item, str)]
    return ReadResult(source=result.source, molecules=kept, rejected=list(result.rejected) + refused)


def report_rejected(result, limit: int = 10) -> None:
    print(result.summary())
    for rejected in result.rejected[:limit]:
        print(f"  rejected: {rejected}")
    if len(result.rejected) > limit:
        print(f"  ... and {len(result.rejected) - limit} more (use 'molinv check --rejected-out' for all)")


def labelled(args):
    """Molecules with energies, and the energies (eV) in the 'energy' property."""
    import numpy as np

    result = on_route(args, read_input(args, require_energy=True))
    report_rejected(result)
    if len(result.molecules) < 10:
        raise CommandError(f"{len(result.molecules)} usable labelled molecules; at least 10 are needed")
    key = "energy" if parse_qm9_source(args.input) else energy_key(args)
    return result.molecules, np.array([atoms.info[key] for atoms in result.molecules])


def write_rejected(rejected, path: Path) -> None:
    import pandas as pd

    from .screening.spreadsheet import spreadsheet_safe

    columns = ["source", "record", "line", "name", "reason"]
    table = pd.DataFrame([[getattr(r, c) for c in columns] for r in rejected], columns=columns)
    with written_atomically(path) as temporary:
        spreadsheet_safe(table).to_csv(temporary, index=False)


def write_result_table(table, path: Path, unit: str) -> None:
    """A prediction table as CSV: energies and distances to the digits that mean something, text safe for
    spreadsheets."""
    from .screening.precision import rounded
    from .screening.spreadsheet import spreadsheet_safe

    with written_atomically(path) as temporary:
        spreadsheet_safe(rounded(table, unit)).to_csv(temporary, index=False)


def write_geometries(path: Path, molecules) -> None:
    from .molecules import write_molecules

    write_molecules(path, molecules)
    print(f"{len(molecules)} geometries (Angstrom) with name, charge and multiplicity -> {path}")


def run_check(args) -> int:
    from collections import Counter

    from .molecules.electrons import electronic_state, state_name

    result = read_input(args, require_energy=args.require_energy)
    report_rejected(result, limit=len(result.rejected))
    states = Counter(state_name(*electronic_state(atoms)) for atoms in result.molecules)
    if states:
        print("charge and spin: " + ", ".join(f"{n} {state}" for state, n in states.most_common()))
    if args.rejected_out:
        write_rejected(result.rejected, args.rejected_out)
        print(f"rejected records written to {args.rejected_out}")
    return 0 if result.molecules else 2


def add_recipe_options(parser, several: bool = False) -> None:
    from .recipes import DESCRIPTORS, MODEL_HELP

    described = "; ".join(f"{k}: {v[3]}" for k, v in DESCRIPTORS.items())
    if several:
        parser.add_argument("--descriptor", action="append", choices=list(DESCRIPTORS), metavar="NAME",
                            help=f"descriptor, repeat for several curves side by side (default atoms; {described})")
        parser.add_argument("--model", action="append", choices=list(MODEL_HELP), metavar="NAME",
                            help="model, one per --descriptor or one for all (default kernel; " + "; ".join(f"{k}: {v}" for k, v in MODEL_HELP.items()) + ")")
    else:
        parser.add_argument("--descriptor", default="atoms", choices=list(DESCRIPTORS), metavar="NAME",
                            help=f"default atoms. {described}")
        parser.add_argument("--model", default="kernel", choices=list(MODEL_HELP), metavar="NAME",
                            help="default kernel. " + "; ".join(f"{k}: {v}" for k, v in MODEL_HELP.items()))
    parser.add_argument("--cache", type=Path, default=None,
                        help="folder of cached descriptor values (default: none; reruns then recompute)")
    parser.add_argument("--jobs", type=int, default=1, help="worker processes for describing molecules")
    parser.add_argument("--atom-components", type=int, default=None, metavar="N",
                        help="for 'atoms' only: keep N principal directions per element of each atom's vector "
                             "(fitted on the molecules, no labels) instead of all 2,325 entries; makes tens of "
                             "thousands of molecules fit in memory and the kernels faster (default: keep all)")
    parser.add_argument("--landmarks", type=int, default=None, metavar="N",
                        help="for the 'large' model only: landmarks of the Nystrom approximation (atoms per "
                             "element for 'atoms', molecules otherwise; default 2,500 and 4,000). More landmarks "
                             "lower the error at large training sets and cost about N^3 per factorisation")


CLUSTER_HELP = ("run the chunks on Dask: 'local' (a local cluster, one worker per core), a scheduler address "
                "(tcp://HOST:8786), or jobqueue:KIND[:JOBS] for a batch system (KIND: slurm, pbs, sge, lsf, htcondor, "
                "moab, oar; queue, cores and memory from ~/.config/dask/jobqueue.yaml). The output folder must be "
                "shared with the workers. Default: this machine, no Dask")


def add_execution_options(parser, jobs: bool = True) -> None:
    if jobs:
        parser.add_argument("--jobs", type=int, default=1, help="local worker processes (default 1; -1: one per core)")
    parser.add_argument("--cluster", metavar="WHERE", help=CLUSTER_HELP)


def executor(args):
    import warnings

    from .cluster import executor_for

    # Warnings from opening a cluster (an unsafe scheduler address) as one line each.
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            return executor_for(args.cluster, args.jobs)
        finally:
            for warning in caught:
                print(f"molinv {args.verb}: warning: {warning.message}", file=sys.stderr)


def feature_store(args):
    from .descriptors.store import FeatureStore

    return FeatureStore(args.cache) if args.cache else None


def descriptor_overrides(descriptor_name: str, args) -> dict:
    from .recipes import DESCRIPTORS

    takes_components = DESCRIPTORS[descriptor_name][1] == "AtomWaveletInvariants"
    given = getattr(args, "atom_components", None)
    return {"n_components": given} if given is not None and takes_components else {}


def energy_model(descriptor_name: str, model_name: str, args):
    from .recipes import EnergyModel, make_descriptor, make_regressor

    overrides = descriptor_overrides(descriptor_name, args)
    descriptor = make_descriptor(descriptor_name, n_jobs=args.jobs, progress=True, **overrides)
    regressor = make_regressor(model_name, descriptor.per_atom, progress=True, descriptor=descriptor_name,
                               landmarks=getattr(args, "landmarks", None))
    return EnergyModel(descriptor, regressor, feature_store(args), geometry_level=getattr(args, "geometry_level", None))


def run_describe(args) -> int:
    import json

    import numpy as np

    from .cluster.chunks import folder_beside
    from .recipes import describe, make_descriptor

    overrides = descriptor_overrides(args.descriptor, args)
    descriptor = make_descriptor(args.descriptor, n_jobs=args.jobs, progress=True, **overrides)
    if args.cluster:
        from .descriptors.store import describe_in_chunks

        if args.cache:
            raise CommandError("--cache and --cluster: on a cluster the chunk folder beside --out is the cache")
        folder = folder_beside(args.out)
        with executor(args) as runner:
            # The workers embed SMILES; the descriptor is fitted here on all the molecules, as locally.
            result = read_input(args, require_energy=False, runner=runner, folder=folder / "read")
            report_rejected(result)
            descriptor.fit(result.molecules)
            features = describe_in_chunks(descriptor, result.molecules, folder, executor=runner, progress=True)
    else:
        result = read_input(args, require_energy=False)
        report_rejected(result)
        features = describe(descriptor.fit(result.molecules), result.molecules, feature_store(args))
    arrays = {"names": np.array([str(a.info["name"]) for a in result.molecules]),
              "settings_json": np.array(json.dumps(descriptor.settings()))}
    if descriptor.per_atom:
        arrays.update(values=features.values, numbers=features.numbers, offsets=features.offsets)
    else:
        arrays["values"] = features
    out = args.out if args.out.suffix == ".npz" else args.out.with_name(args.out.name + ".npz")
    with written_atomically(out) as temporary, open(temporary, "wb") as handle:
        np.savez(handle, **arrays)
    print(f"{len(result.molecules)} molecules described with {args.descriptor} ({features.shape[1]} numbers each"
          f"{' per atom' if descriptor.per_atom else ''}) -> {out}")
    return 0


def run_fit(args) -> int:
    from .evaluation.curves import fit_summary
    from .molecules.electrons import state_name
    from .molecules.route import describe_route
    from .molecules.units import convert_energy

    molecules, energies = labelled(args)
    model = energy_model(args.descriptor, args.model, args).fit(molecules, energies)
    target = energy_key(args)
    path = model.save(args.out, target=target, training={"source": str(args.input), "n_molecules": len(molecules)})
    print(f"model fitted on {len(molecules)} molecules -> {path}")
    print(f"geometry route: {describe_route(model.route_)}")
    for line in fit_summary(model.regressor_):
        print(line)
    spread = convert_energy(float(energies.std()), "eV", "kcal/mol")
    print(f"training {target} values spread (standard deviation): {spread:.2f} kcal/mol")
    states = ", ".join(state_name(*state) for state in model.chemistry_.states_)
    print(f"trained on {states} molecules; predict and screen fail molecules in other charge or spin states")
    return 0


def run_predict(args) -> int:
    import pandas as pd

    from .cluster.chunks import folder_beside
    from .molecules.route import describe_route
    from .recipes import EnergyModel
    from .screening import CAUTION, prediction_table
    from .screening.held_out import compare_with_references
    from .screening.ranking import ranking_note

    model, metadata = EnergyModel.load(args.model_file)
    compared = []
    if args.geometries and (args.cluster or args.jobs != 1):
        raise CommandError("--geometries works without --jobs and --cluster (the molecules stay in the workers)")
    if args.cluster or args.jobs != 1:
        # Chunks beside the output, so that an interrupted prediction resumes.
        summary = screen(args, model, metadata, folder_beside(args.out), chunk_size=1000, parquet=False)
        table = pd.read_csv(summary.table_path, keep_default_na=False, na_values=[""])
    else:
        result = read_input(args, require_energy=False)
        print(result.summary())
        table = prediction_table(model, result.molecules, result.rejected, unit=args.unit, target=metadata["target"],
                                 energy_keys=(energy_key(args),))
        if energy_key(args) == metadata["target"]:
            table, compared = compare_with_references(table, result.molecules, energy_key(args), metadata["target"],
                                                      args.unit, getattr(model.regressor_, "interval_level", 0.9))
    write_result_table(table, args.out, args.unit)
    counts = table["status"].value_counts().to_dict()
    print(f"{len(table)} rows -> {args.out}: " + ", ".join(f"{n} {s}" for s, n in counts.items()))
    for line in compared:
        print(line)
    if args.geometries:
        write_geometries(args.geometries, result.molecules)
    print(f"table {ranking_note(metadata['target'])}")
    print(f"model's geometry route: {describe_route(model.route_)}")
    print(f"Caution: {CAUTION}")
    return 0


def run_curve(args) -> int:
    import json

    from .evaluation import CurveRun, write_report
    from .molecules.qm9 import CITATION
    from .molecules.route import describe_route, training_route
    from .recipes import model_inputs

    descriptors = args.descriptor or ["atoms"]
    models = args.model or ["kernel"]
    if len(models) not in (1, len(descriptors)):
        raise CommandError("give one --model for all descriptors, or one per --descriptor")
    models = models * len(descriptors) if len(models) == 1 else models
    molecules, energies = labelled(args)
    route = describe_route(training_route(molecules, args.geometry_level))
    run = CurveRun.open(args.out / "run", energies, test_size=args.test_size, sizes=args.sizes,
                        n_draws=args.draws, seed=args.seed)
    recorded = {}
    for descriptor_name, model_name in zip(descriptors, models):
        model = energy_model(descriptor_name, model_name, args)
        # The descriptor is fitted (element set, padding) on all molecules, labels unseen;
        # the regressor is fitted on each training draw only.
        inputs = model_inputs(model.descriptor.fit(molecules), molecules, model.feature_store)
        label = f"{descriptor_name} + {model_name}"
        recorded[f"{label}: descriptor"] = json.dumps(model.descriptor.settings()["params"])
        recorded[f"{label}: model"] = json.dumps(model.regressor.get_params(), default=str)
        run.run(inputs, model.regressor, label, progress=True, settings=model.descriptor.settings())

    page = write_report(run, args.out, unit=args.unit, target=args.target,
                        n_atoms=[len(a) for a in molecules],
                        settings={"data": args.input, "geometry route": route, "energy": energy_key(args),
                                  "test molecules": args.test_size,
                                  "draws per size": args.draws, "seed": args.seed, "descriptors": ", ".join(descriptors),
                                  "models": ", ".join(models), **recorded},
                        data_citation=CITATION if parse_qm9_source(args.input) else str(args.input))
    print(f"report: {page}")
    return 0


def screen(args, model, metadata, out: Path, chunk_size: int, parquet: bool):
    """screen_file on the input argument (a file, or a QM9 sample) with the chosen executor."""
    import hashlib

    from .screening.screen import screen_file

    fingerprint = hashlib.sha256(args.model_file.read_bytes()).hexdigest()
    common = dict(model_fingerprint=fingerprint, target=metadata["target"], unit=args.unit, chunk_size=chunk_size,
                  parquet=parquet, progress=True)
    with executor(args) as runner:
        if parse_qm9_source(args.input):
            molecules = read_input(args, require_energy=False).molecules
            return screen_file(model, molecules, out, source_label=args.input, executor=runner, **common)
        options = {"file_format": args.file_format, "length": args.length_unit, "energy": args.energy_unit,
                   "smiles_column": args.smiles_column, "name_column": args.name_column}
        return screen_file(model, args.input, out, read_options=options, executor=runner, **common)


def run_screen(args) -> int:
    from .recipes import EnergyModel

    model, metadata = EnergyModel.load(args.model_file)
    if parse_qm9_source(args.input):
        raise CommandError("screen reads candidate files (.smi, .csv, .sdf, .xyz); use 'predict' for QM9 samples")
    summary = screen(args, model, metadata, args.out, args.chunk_size, args.parquet)
    print(summary.text(args.unit))
    print(f"summary page: {args.out / 'summary.html'}")
    if summary.computed:
        seconds = [report.seconds for report in summary.computed]
        print(f"{len(seconds)} chunks computed in this run, {sum(seconds) / len(seconds):.1f} s each on average "
              f"(time inside the workers)")
    return 0


def add_method_options(parser) -> None:
    from .labels.methods import KINDS

    parser.add_argument("--method", default="xtb", choices=KINDS,
                        help="hf: restricted Hartree-Fock (PySCF); dft: Kohn-Sham DFT (PySCF); xtb: GFN2-xTB (tblite). "
                             "Needs pip install 'molinv[quantum]'")
    parser.add_argument("--functional", default="B3LYPG",
                        help="PySCF functional name for --method dft (default B3LYPG: B3LYP with VWN3, as in Gaussian and QM9)")
    parser.add_argument("--basis", default="6-31G(2df,p)", help="basis set for hf and dft (default 6-31G(2df,p), as QM9)")
    parser.add_argument("--cartesian", action="store_true", help="Cartesian d and f functions (default spherical)")
    parser.add_argument("--grid-level", type=int, default=3, help="PySCF DFT grid level 0-9 (default 3)")
    parser.add_argument("--max-cycles", type=int, default=100, help="SCF iterations before giving up (default 100)")
    parser.add_argument("--optimize", action="store_true",
                        help="move each molecule to its GFN2-xTB minimum first (tblite, BFGS to 0.02 eV/Angstrom) and "
                             "compute the energy there; the method reads METHOD//GFN2-xTB and geometry_source says "
                             "where the optimisation started (default: a single point on the input geometry)")


def label_method(args):
    from .labels import LabelMethod

    return LabelMethod(args.method, functional=args.functional, basis=args.basis, grid_level=args.grid_level,
                       max_cycles=args.max_cycles, cartesian=args.cartesian, optimize=args.optimize)


def run_label(args) -> int:
    from contextlib import nullcontext

    from .labels import label_molecules, read_labels

    method = label_method(args)
    result = read_input(args, require_energy=False)
    report_rejected(result)
    if not result.molecules:
        raise CommandError("no usable molecules to compute")
    if args.multiplicity is not None:
        for atoms in result.molecules:
            atoms.info["multiplicity"] = args.multiplicity
    with executor(args) if args.cluster else nullcontext() as runner:
        summary = label_molecules(result.molecules, method, args.out, n_jobs=args.jobs, chunk_size=args.chunk_size,
                                  retry_failed=args.retry_failed, progress=True, executor=runner,
                                  geometries=args.out.with_suffix(".xyz"))
    print(f"{method.name}: {summary.text()}")
    table = read_labels(args.out, method)
    failed = table[table["status"] == "failed"]
    for _, row in failed.head(10).iterrows():
        print(f"  failed: {row['name']}: {row['reason']}")
    if len(failed) > 10:
        print(f"  ... and {len(failed) - 10} more (status 'failed' in {args.out})")
    print("energies in Hartree and eV; atomization energies (eV) from free atoms computed with the same method")
    print(f"computed geometries with their energies, charge and multiplicity: {args.out.with_suffix('.xyz')} "
          f"(molinv fit {args.out.with_suffix('.xyz')} --energy-key atomization_energy)")
    return 0


def add_strategy_options(parser, choices) -> None:
    parser.add_argument("--strategy", default="uncertain", choices=choices,
                        help="uncertain (default): most uncertain, spread out; spread: farthest point in scaled "
                             "descriptor space, no model; variance: largest drop of the summed predicted variance "
                             "over the candidates (model kernel only)"
                             + ("; random: the baseline" if "random" in choices else ""))
    parser.add_argument("--shortlist", type=float, default=4.0,
                        help="uncertain: pick among the shortlist x k most uncertain (default 4; 1 = uncertainty only)")
    parser.add_argument("--reference", type=int, default=1000,
                        help="variance: candidates sampled to stand for all (default 1000)")


def run_pick(args) -> int:
    from .labels.choose import STRATEGIES, pick_table
    from .recipes import EnergyModel

    model, metadata = EnergyModel.load(args.model_file)
    result = read_input(args, require_energy=False)
    report_rejected(result)
    labelled = None
    if args.labelled:
        from .molecules import read_molecules

        labelled = read_molecules(args.labelled).molecules
    table = pick_table(model, result.molecules, result.rejected, args.k, unit=args.unit, target=metadata["target"],
                       include_far=args.include_far, energy_keys=(energy_key(args),), shortlist_factor=args.shortlist,
                       labelled=labelled,
                       strategy=args.strategy, reference_size=args.reference, seed=args.seed)
    write_result_table(table, args.out, args.unit)
    picked = table[table["pick_order"].notna()].sort_values("pick_order")
    if args.geometries:
        by_record = {atoms.info["record"]: atoms for atoms in result.molecules}
        write_geometries(args.geometries, [by_record[record] for record in picked["record"]])
    shown = ["pick_order", "record", "name", "formula", f"{metadata['target']}_{args.unit}", f"std_{args.unit}", "status"]
    print(f"picked {args.k} of {len(table)} rows ({STRATEGIES[args.strategy]}) -> {args.out}")
    print(picked[shown].to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    counts = table["status"].value_counts().to_dict()
    print("rows: " + ", ".join(f"{n} {s}" for s, n in counts.items()) + " (failed rows are never picked; "
          f"the reason column of {args.out} says why)")
    return 0


def run_pick_loop(args) -> int:
    import numpy as np

    from .evaluation import summarize
    from .evaluation.curves import test_split
    from .evaluation.report import plot_learning_curves
    from .labels.choose import molecule_vectors
    from .labels.loop import ComputedLabels, HiddenLabels, PickLoop
    from .labels.run import molecule_names
    from .recipes import make_descriptor, make_regressor, model_inputs

    if args.model not in ("kernel", "large"):
        raise CommandError("pick-loop needs a model that states its uncertainty: --model kernel or large")
    if args.simulate:
        molecules, energies = labelled(args)
        labeller = HiddenLabels(energies)
    else:
        result = read_input(args, require_energy=False)
        report_rejected(result)
        molecules = result.molecules
        labeller = ComputedLabels(molecules, label_method(args), args.out / "computed.csv", n_jobs=args.jobs,
                                  progress=True)
    test, _ = test_split(len(molecules), args.test_size, args.seed)
    # The descriptor is fitted (element set, padding) on all candidates, labels unseen.
    descriptor = make_descriptor(args.descriptor, n_jobs=args.jobs, progress=True).fit(molecules)
    inputs = model_inputs(descriptor, molecules, feature_store(args))
    loop = PickLoop(args.out, molecule_names(molecules), inputs, molecule_vectors(inputs, descriptor.elements_),
                    make_regressor(args.model, descriptor.per_atom, descriptor=args.descriptor), labeller, test,
                    sizes=args.sizes, strategy=args.strategy, seed=args.seed, shortlist_factor=args.shortlist,
                    reference_size=args.reference, tune_once=args.tune_once)
    rounds = loop.run(progress=True)
    summary = summarize(rounds, unit=args.unit)
    with written_atomically(args.out / "summary.csv") as temporary:
        summary.to_csv(temporary, index=False)
    plot_learning_curves(summary, {}, args.unit, None, args.out / "learning_curve.png")
    shown = summary[["size"] + [f"{metric}_mean_{args.unit}" for metric in ("mae", "rmse", "max_error")]]
    shown.columns = ["labelled", f"test MAE ({args.unit})", f"RMSE ({args.unit})", f"max error ({args.unit})"]
    print(f"{loop.label}, test set of {len(test)}:")
    print(shown.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    print(f"rounds: {loop.rounds_path}; labels: {loop.labels_path}; curve: {args.out / 'learning_curve.png'}")
    if isinstance(labeller, HiddenLabels):
        print(f"labels revealed in this run: {len(labeller.revealed)} (test set and picked molecules only)")
    return 0


# Package data: found the same way in a source checkout and in an installed wheel.
DEMO_DATA = Path(str(resources.files("molinv.demo_data") / "candidates.csv"))


def run_demo(args) -> int:
    """Learning curve on a QM9 sample, a model fitted on it, and the demo candidates ranked."""
    from .evaluation import CurveRun, write_report
    from .evaluation.curves import training_draw
    from .molecules import read_molecules
    from .molecules.qm9 import CITATION, load_qm9
    from .molecules.route import onto_embedded_route
    from .recipes import EnergyModel, make_descriptor, make_regressor, model_inputs
    from .screening import CAUTION, prediction_table

    candidates_file = args.candidates
    if not candidates_file.is_file():
        raise CommandError(f"{candidates_file}: demo candidates not found (give --candidates)")
    out = args.out
    print(f"1/3 loading {args.molecules} QM9 molecules ({CITATION}), geometries made from their SMILES")
    # Trained on geometries made from the SMILES, as the candidates' are.
    moved = onto_embedded_route(load_qm9(n=args.molecules, seed=args.seed), progress=True)
    molecules = [atoms for atoms in moved if not isinstance(atoms, str)]
    for reason in [item for item in moved if isinstance(item, str)]:
        print(f"  left out: {reason}")
    energies = [atoms.info["atomization_energy"] for atoms in molecules]
    run = CurveRun.open(out / "run", energies, test_size=args.test_size, sizes=args.sizes, n_draws=2, seed=args.seed)
    print(f"2/3 learning curves on atomization energy (from U0), test set of {args.test_size} molecules")
    for name in ("atoms", "coulomb"):
        descriptor = make_descriptor(name, progress=True).fit(molecules)
        regressor = make_regressor("kernel", descriptor.per_atom, progress=True, descriptor=name)
        run.run(model_inputs(descriptor, molecules), regressor, f"{name} + kernel", progress=True)
    page = write_report(run, out, unit="kcal/mol", target=1.0, n_atoms=[len(a) for a in molecules],
                        settings={"data": f"QM9 sample of {args.molecules} (seed {args.seed})",
                                  "energy": "atomization energy from U0", "test molecules": args.test_size},
                        data_citation=CITATION, title="molinv demo: learning curves on QM9")
    largest = max(run.sizes)
    print(f"3/3 fitting atoms + kernel on {largest} QM9 molecules and ranking {candidates_file.name}")
    train = [molecules[i] for i in training_draw(run.pool, largest, 0, args.seed)]
    model = EnergyModel(make_descriptor("atoms"), make_regressor("kernel", True, progress=True))
    model.fit(train, [atoms.info["atomization_energy"] for atoms in train])
    model.save(out / "model.npz", target="atomization_energy", training={"source": "QM9", "n_molecules": largest})
    read = read_molecules(candidates_file)
    table = prediction_table(model, read.molecules, read.rejected, unit="kcal/mol", target="atomization_energy")
    write_result_table(table, out / "candidates_ranked.csv", "kcal/mol")
    shown = ["name", "formula", "atomization_energy_kcal/mol", "std_kcal/mol",
             "atomization_energy_per_atom_kcal/mol", "relative_to_best_isomer_kcal/mol", "status"]
    print(table[shown].head(8).to_string(index=False, float_format=lambda v: f"{v:.1f}"))
    counts = table["status"].value_counts().to_dict()
    print("candidates: " + ", ".join(f"{n} {s}" for s, n in counts.items()))
    print(f"report: {page}")
    print(f"ranked candidates: {out / 'candidates_ranked.csv'}")
    print(f"Caution: {CAUTION}")
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="molinv",
        description="Energies of small molecules from their 3D structure. " + UNITS_HELP,
    )
    verbs = parser.add_subparsers(dest="verb", required=True, metavar="VERB")
    check = verbs.add_parser(
        "check",
        help="read a molecule file, validate every record and list the rejected ones",
        description="Read molecules and report which records are usable. " + UNITS_HELP,
    )
    add_input_options(check)
    check.add_argument("--require-energy", action="store_true", help="reject records without a numeric energy")
    check.add_argument("--rejected-out", type=Path, help="write the rejected records to this CSV")
    check.set_defaults(run=run_check)

    describe = verbs.add_parser("describe", help="compute a descriptor for every molecule into a .npz feature file",
                                description="Describe molecules by invariant numbers. " + UNITS_HELP)
    add_input_options(describe)
    add_recipe_options(describe)
    describe.add_argument("--out", type=Path, required=True, help="feature file to write (.npz)")
    add_execution_options(describe, jobs=False)
    describe.set_defaults(run=run_describe)

    fit = verbs.add_parser("fit", help="fit an energy model on labelled molecules into a model file",
                           description="Fit descriptor + regressor on labelled molecules. Energies are converted to "
                                       "eV on reading. " + UNITS_HELP)
    add_input_options(fit)
    add_route_options(fit)
    add_recipe_options(fit)
    fit.add_argument("--out", type=Path, required=True, help="model file to write (.npz; holds no pickle)")
    fit.set_defaults(run=run_fit)

    predict = verbs.add_parser("predict", help="predict energies of new molecules with a model file",
                               description="Predict with a model file; every input row appears once in the output, "
                                           "with its status. " + UNITS_HELP)
    predict.add_argument("model_file", type=Path, help="model file written by 'molinv fit'")
    add_input_options(predict)
    predict.add_argument("--unit", default="kcal/mol", help="energy unit of the output table (default kcal/mol)")
    predict.add_argument("--out", type=Path, required=True, help="table to write (.csv)")
    predict.add_argument("--geometries", type=Path, metavar="PATH",
                         help="also write the molecules predicted on (.xyz extended XYZ or .sdf), with name, "
                              "charge and multiplicity, for a quantum-chemistry step")
    add_execution_options(predict)
    predict.set_defaults(run=run_predict)

    screen = verbs.add_parser("screen", help="rank a candidate file of any size, in resumable chunks",
                              description="Predict every candidate with a model file, in chunks written as they "
                                          "finish (a rerun resumes); writes ranked.csv and summary.txt. Each row "
                                          "has a status: ok, flagged (unlike the training set, or repeated name) or "
                                          "failed (with the reason). " + UNITS_HELP)
    screen.add_argument("model_file", type=Path, help="model file written by 'molinv fit'")
    add_input_options(screen)
    screen.add_argument("--unit", default="kcal/mol", help="energy unit of the output (default kcal/mol)")
    screen.add_argument("--chunk-size", type=int, default=1000, help="candidates per chunk (default 1000)")
    screen.add_argument("--parquet", action="store_true", help="also write ranked.parquet (needs pyarrow)")
    screen.add_argument("--out", type=Path, required=True, help="output folder (also holds the finished chunks)")
    add_execution_options(screen)
    screen.set_defaults(run=run_screen)

    curve = verbs.add_parser("curve", help="learning curve: test error against training-set size, with a report",
                             description="Draw a fixed test set, fit on growing training sets (hyperparameters by "
                                         "cross-validation inside each), and write CSV, plots and report.html. "
                                         "Interrupted runs resume from the finished points. " + UNITS_HELP)
    add_input_options(curve)
    add_route_options(curve)
    add_recipe_options(curve, several=True)
    curve.add_argument("--sizes", type=int, nargs="+", default=[100, 200, 500, 1000, 2000, 5000, 10000, 20000],
                       help="training sizes (those that fit beside the test set are used)")
    curve.add_argument("--draws", type=int, default=3, help="random training sets per size (default 3)")
    curve.add_argument("--test-size", type=int, default=1000, help="held-out test molecules (default 1000)")
    curve.add_argument("--seed", type=int, default=0, help="seed of the test set and training draws")
    curve.add_argument("--target", type=float, default=1.0, help="accuracy wanted, in --unit (default 1.0)")
    curve.add_argument("--unit", default="kcal/mol", help="energy unit of the report (default kcal/mol)")
    curve.add_argument("--out", type=Path, required=True, help="report folder (also holds the resumable run)")
    curve.set_defaults(run=run_curve)

    label = verbs.add_parser("label", help="compute reference energies (HF, DFT or GFN2-xTB) into a labels file",
                             description="Compute the total and atomization energy of every molecule with PySCF or "
                                         "tblite, in parallel single-thread processes or on a Dask cluster; each "
                                         "chunk's rows are written as it finishes (via OUT.chunks/), failures keep "
                                         "their reason, and a rerun skips names already in the file. Each molecule is "
                                         "computed at its charge and spin multiplicity (columns charge and "
                                         "multiplicity): restricted for closed shells, unrestricted for open "
                                         "shells. " + UNITS_HELP)
    add_input_options(label)
    add_method_options(label)
    label.add_argument("--jobs", type=int, default=1, help="worker processes, one thread each (default 1)")
    label.add_argument("--chunk-size", type=int, default=None,
                       help="molecules per task (default 1 for hf/dft, 16 for xtb)")
    label.add_argument("--multiplicity", type=int, default=None,
                       help="spin multiplicity 2S+1 to compute every molecule at, overriding the input's (default: "
                            "the input's: SMILES radicals, an extended-XYZ or CSV 'multiplicity' field; where it "
                            "cannot say, singlet, or doublet for an odd electron count). SMILES O=O reads as a "
                            "singlet: give 3 for ground-state O2")
    label.add_argument("--retry-failed", action="store_true", help="recompute molecules whose earlier row failed")
    label.add_argument("--out", type=Path, required=True,
                       help="labels file (.csv), appended to; the computed geometries go beside it (.xyz)")
    add_execution_options(label, jobs=False)
    label.set_defaults(run=run_label)

    pick = verbs.add_parser("pick", help="choose the next k candidates worth computing",
                            description="Predict every candidate with a model file and pick k of them: by default "
                                        "among the most uncertain, spread out in descriptor space (greedy farthest "
                                        "point); see --strategy. The table has every input row once, with its status; "
                                        "failed rows (unreadable, elements or charge/spin state outside the "
                                        "training set) are never picked. " + UNITS_HELP)
    pick.add_argument("model_file", type=Path, help="model file written by 'molinv fit' (model kernel or large)")
    add_input_options(pick)
    pick.add_argument("--k", type=int, default=10, help="how many to pick (default 10)")
    pick.add_argument("--labelled", type=Path, help="molecules already computed: candidates near them count as near")
    add_strategy_options(pick, ["uncertain", "spread", "variance"])
    pick.add_argument("--seed", type=int, default=0, help="seed of the reference sample of --strategy variance")
    pick.add_argument("--include-far", action="store_true",
                      help="also pick candidates with more than 1.5 times the non-hydrogen atoms of any training "
                           "molecule (default: not picked, one label does not make the model fit for them)")
    pick.add_argument("--unit", default="kcal/mol", help="energy unit of the output (default kcal/mol)")
    pick.add_argument("--out", type=Path, required=True, help="table of all candidates with pick_order (.csv)")
    pick.add_argument("--geometries", type=Path, metavar="PATH",
                      help="also write the picked molecules in pick order (.xyz extended XYZ or .sdf), with name, "
                           "charge and multiplicity, for the quantum-chemistry step")
    pick.set_defaults(run=run_pick)

    loop = verbs.add_parser("pick-loop", help="repeat pick, compute, refit and measure for several rounds",
                            description="A fixed test set is labelled first; then each round labels a batch "
                                        "(round 0 at random, later rounds picked by the model), refits and "
                                        "measures the test error. With --simulate the energies in the input are "
                                        "hidden until picked; otherwise they are computed with --method. "
                                        "A rerun resumes; more --sizes extend a finished loop. " + UNITS_HELP)
    add_input_options(loop)
    add_route_options(loop)
    add_recipe_options(loop)
    add_method_options(loop)
    loop.add_argument("--simulate", action="store_true", help="use the energies in the input, revealed when picked")
    loop.add_argument("--sizes", type=int, nargs="+", default=[100, 200, 300, 500, 700, 1000],
                      help="labelled training molecules after each round")
    loop.add_argument("--test-size", type=int, default=500, help="test molecules, labelled first (default 500)")
    add_strategy_options(loop, ["uncertain", "spread", "variance", "random"])
    loop.add_argument("--tune-once", action="store_true",
                      help="search width and regularisation on round 0 only, keep them later (cheaper refits)")
    loop.add_argument("--seed", type=int, default=0, help="seed of the test set, initial set and random batches")
    loop.add_argument("--unit", default="kcal/mol", help="energy unit of the report (default kcal/mol)")
    loop.add_argument("--out", type=Path, required=True, help="loop folder (resumable)")
    loop.set_defaults(run=run_pick_loop)

    demo = verbs.add_parser("demo", help="run the main job on the bundled demo data and say where the report is",
                            description="Learning curves on a QM9 sample, then the demo candidates ranked by a model "
                                        "trained on it. Energies in kcal/mol. A few minutes on 2 cores.")
    demo.add_argument("--candidates", type=Path, default=DEMO_DATA, help="candidate list (default: the bundled one)")
    demo.add_argument("--molecules", type=int, default=1500, help="QM9 molecules to sample (default 1500)")
    demo.add_argument("--test-size", type=int, default=500, help="held-out test molecules (default 500)")
    demo.add_argument("--sizes", type=int, nargs="+", default=[100, 200, 500], help="training sizes")
    demo.add_argument("--seed", type=int, default=0, help="seed of the QM9 sample and the splits")
    demo.add_argument("--out", type=Path, default=Path("molinv-demo"), help="output folder (default ./molinv-demo)")
    demo.set_defaults(run=run_demo)
    return parser


#: Verbs whose --out is a folder (the others write one file there).
FOLDER_OUTPUTS = ("screen", "curve", "pick-loop", "demo")


def check_outputs(args) -> None:
    """Refuse an output location that cannot be written before any work is done."""
    if getattr(args, "out", None) is not None:
        check_writable(args.out, folder=args.verb in FOLDER_OUTPUTS)
    if getattr(args, "rejected_out", None) is not None:
        check_writable(args.rejected_out)


def main(argv=None) -> int:
    args = build_parser().parse_args(argv)
    try:
        check_outputs(args)
        return args.run(args)
    except MolinvError as error:
        print(f"molinv {args.verb}: error: {error}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"molinv {args.verb}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
