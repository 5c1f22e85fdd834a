"""Tests of the atom-centred solid harmonic wavelet invariants.

Geometries come from ase's G2 collection (ase.build.molecule; G2 set of
L. A. Curtiss, K. Raghavachari, P. C. Redfern, J. A. Pople, "Assessment of
Gaussian-2 and density functional theories for the computation of enthalpies
of formation", J. Chem. Phys. 106, 1063 (1997)). Spherical harmonics are
checked against scipy.special.sph_harm_y, and the closed-form coefficients
against direct numerical quadrature.
"""

from __future__ import annotations

import numpy as np
import pytest
from ase import Atoms
from ase.build import molecule
from scipy.optimize import linear_sum_assignment
from scipy.spatial.transform import Rotation
from scipy.special import sph_harm_y
from sklearn.base import clone

from molinv.descriptors.atomic import (
    AtomWaveletInvariants,
    filtered_coefficients,
    real_spherical_harmonics,
)
from molinv.descriptors.base import AtomFeatures, DescriptorError

QM9_ELEMENTS = ("H", "C", "N", "O", "F")


def g2(name: str) -> Atoms:
    """A molecule from ase's G2 collection (Curtiss et al., J. Chem. Phys. 106, 1063, 1997)."""
    return molecule(name)


def small_descriptor(**changes) -> AtomWaveletInvariants:
    settings = dict(n_scales=4, min_width=0.4, max_width=2.5, max_degree=4, elements=QM9_ELEMENTS, progress=False)
    settings.update(changes)
    return AtomWaveletInvariants(**settings)


def vectors(descriptor, atoms: Atoms) -> np.ndarray:
    return descriptor.fit([atoms]).transform([atoms]).values


def relative_difference(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.max(np.abs(a - b)) / np.max(np.abs(a)))


def scipy_real_harmonic(l: int, m: int, theta: np.ndarray, phi: np.ndarray) -> np.ndarray:
    """Real orthonormal Y_lm from scipy's complex harmonics (Condon-Shortley phase removed)."""
    complex_value = sph_harm_y(l, abs(m), theta, phi)
    if m == 0:
        return complex_value.real
    part = complex_value.real if m > 0 else complex_value.imag
    return np.sqrt(2.0) * (-1.0) ** m * part


def test_real_harmonics_match_scipy():
    # Reference library: scipy.special.sph_harm_y (SciPy >= 1.15).
    rng = np.random.default_rng(1)
    directions = rng.normal(size=(200, 3))
    directions /= np.linalg.norm(directions, axis=1, keepdims=True)
    theta, phi = np.arccos(directions[:, 2]), np.arctan2(directions[:, 1], directions[:, 0])
    ours = real_spherical_harmonics(directions, 7)
    for l in range(8):
        for m in range(-l, l + 1):
            np.testing.assert_allclose(ours[:, l * l + l + m], scipy_real_harmonic(l, m, theta, phi), atol=1e-13)


def test_closed_form_matches_quadrature():
    # Direct numerical quadrature of  integral rho_e(x) psi_{s,l,m}(x - r_i) dx  on a uniform grid;
    # the wavelet is built from scipy's harmonics, the density from normalised Gaussians.
    # A uniform-grid sum of a smooth, fast-decaying integrand converges spectrally
    # (trapezoid rule error ~ exp(-2 pi^2 a^2 / h^2) for Gaussians of width a; measured ~1e-15 here).
    centre = np.array([0.1, -0.2, 0.05])
    neighbours = np.array([[0.7, -0.5, 0.9], [-0.6, 0.4, -0.3]])
    positions = np.vstack([centre, neighbours])
    channels = np.array([0, 0, 1])
    atom_width, widths, max_degree = 0.35, np.array([0.45, 0.8]), 3
    closed = filtered_coefficients(positions, channels, 2, widths, atom_width, max_degree)[0]

    h = 0.1
    axis = np.arange(-3.5, 3.5 + h / 2, h) + h / 3  # offset keeps grid points off the centre
    x = np.stack(np.meshgrid(axis, axis, axis, indexing="ij"), axis=-1).reshape(-1, 3)
    relative = x - centre
    r = np.linalg.norm(relative, axis=1)
    theta, phi = np.arccos(relative[:, 2] / r), np.arctan2(relative[:, 1], relative[:, 0])
    norm = (2 * np.pi * atom_width**2) ** -1.5
    densities = [
        norm * np.exp(-np.sum((x[:, None, :] - neighbours[channels[1:] == e][None]) ** 2, axis=-1) / (2 * atom_width**2)).sum(1)
        for e in range(2)
    ]
    for j, s in enumerate(widths):
        radial = np.exp(-(r**2) / (2 * s**2))
        for l in range(max_degree + 1):
            for m in range(-l, l + 1):
                peak = 1.0 if l == 0 else (np.e / l) ** (l / 2)  # 1 / max of u^l exp(-u^2/2), at u = sqrt(l)
                wavelet = peak * (r / s) ** l * radial * scipy_real_harmonic(l, m, theta, phi)
                for e in range(2):
                    quadrature = np.sum(densities[e] * wavelet) * h**3
                    assert closed[e, j, l * l + l + m] == pytest.approx(quadrature, abs=1e-12)


@pytest.mark.parametrize("name", ["CH3CH2OH", "CH3CONH2", "CH3COF"])
def test_invariant_under_rotations_reflections_translations(name):
    atoms = g2(name)
    descriptor = small_descriptor()
    reference = vectors(descriptor, atoms)
    rng = np.random.default_rng(7)
    for trial in range(4):
        matrix = Rotation.random(random_state=trial).as_matrix()
        if trial % 2:
            matrix = matrix @ np.diag([1.0, 1.0, -1.0])  # improper: a reflection included
        moved = atoms.copy()
        moved.positions = atoms.positions @ matrix.T + rng.normal(scale=5.0, size=3)
        assert relative_difference(reference, vectors(descriptor, moved)) < 1e-10
        # The coefficients themselves are not invariant; without the products this test would fail.
        channels = np.array([QM9_ELEMENTS.index(s) for s in atoms.get_chemical_symbols()])
        raw = [filtered_coefficients(p, channels, 5, descriptor.widths_, 0.3, 4) for p in (atoms.positions, moved.positions)]
        assert relative_difference(raw[0], raw[1]) > 1e-3


def test_vectors_permute_with_atoms():
    atoms = g2("CH3CONH2")
    descriptor = small_descriptor()
    reference = vectors(descriptor, atoms)
    order = np.random.default_rng(3).permutation(len(atoms))
    permuted = vectors(descriptor, atoms[order])
    assert relative_difference(reference[order], permuted) < 1e-12
    assert relative_difference(reference, permuted) > 1e-3  # rows did move


@pytest.mark.parametrize("cutoff", [None, 2.0])
def test_lipschitz_under_small_displacements(cutoff):
    # ||phi(x + delta) - phi(x)|| <= C ||delta||, with C measured here. With a cutoff, an extra
    # hydrogen sits size/2 inside the cutoff radius of atom 0 and every step carries it across;
    # a hard cutoff would make the change O(1) for any step size and break the linear bound.
    base = g2("CH3CH2OH")
    descriptor = small_descriptor(cutoff=cutoff)
    rng = np.random.default_rng(11)
    ratios = {}
    for size in (1e-2, 1e-3, 1e-4, 1e-5):
        atoms = base.copy()
        if cutoff is not None:
            atoms += Atoms("H", positions=[base.positions[0] + [0.0, 0.0, cutoff - size / 2]])
        reference = vectors(descriptor, atoms)
        found = []
        for _ in range(6):
            step = rng.normal(size=atoms.positions.shape)
            if cutoff is not None:
                step[:-1] *= 0.1
                step[-1] = [0.0, 0.0, 1.0]  # outward, across the cutoff
            step *= size / np.linalg.norm(step)
            moved = atoms.copy()
            moved.positions = atoms.positions + step
            found.append(np.linalg.norm(vectors(descriptor, moved) - reference) / size)
        ratios[size] = max(found)
    constant = max(ratios.values())
    # Per Angstrom of total displacement; measured 0.07-0.6 with these settings.
    assert constant < 5.0
    # Linear response: the ratio stays of the same size as the step shrinks (a jump or a
    # square-root cusp would make it grow like 1/delta or 1/sqrt(delta)).
    assert ratios[1e-5] < 2.0 * ratios[1e-3] and ratios[1e-3] < 2.0 * ratios[1e-2] + 1e-12


def test_enantiomers_have_equal_vectors():
    # A stereocentre: G2 ethanol with one methylene hydrogen relabelled fluorine (CH3-CHF-OH).
    atoms = g2("CH3CH2OH")
    carbon = [i for i, s in enumerate(atoms.get_chemical_symbols()) if s == "C"]
    methylene = max(carbon, key=lambda c: np.sum(atoms.numbers[_bonded(atoms, c)] == 8))
    hydrogen = [k for k in _bonded(atoms, methylene) if atoms.numbers[k] == 1][0]
    atoms.numbers[hydrogen] = 9
    mirror = atoms.copy()
    mirror.positions[:, 0] *= -1.0
    # The mirror image is a different molecule: no proper rotation superposes it (Kabsch RMSD).
    assert _best_rotation_rmsd(atoms.positions, mirror.positions) > 0.1
    descriptor = small_descriptor()
    assert relative_difference(vectors(descriptor, atoms), vectors(descriptor, mirror)) < 1e-10


def test_isomers_have_different_vectors():
    # Ethanol and dimethyl ether, C2H6O, from ase's G2 set. The matched distance between the
    # two sets of same-element vectors must be clearly above that of a rotated copy.
    descriptor = small_descriptor()
    ethanol, ether = g2("CH3CH2OH"), g2("CH3OCH3")
    rotated = ethanol.copy()
    rotated.positions = ethanol.positions @ Rotation.random(random_state=5).as_matrix().T
    assert ethanol.get_chemical_formula() == ether.get_chemical_formula()
    same = _matched_distance(descriptor, ethanol, rotated)
    different = _matched_distance(descriptor, ethanol, ether)
    assert same < 1e-10
    assert different > 0.1


def test_element_mismatch_raises_at_transform():
    descriptor = small_descriptor(elements=None).fit([g2("CH3CH2OH")])
    with pytest.raises(DescriptorError, match="contains N"):
        descriptor.transform([g2("CH3CH2NH2")])


def test_output_layout_and_isolated_atom():
    descriptor = small_descriptor(elements=None, normalize=True)
    molecules = [g2("CH3CH2OH"), g2("CH3OCH3"), Atoms("O", positions=[[0.0, 0.0, 0.0]])]
    features = descriptor.fit(molecules).transform(molecules)
    assert isinstance(features, AtomFeatures)
    n = 3 * descriptor.n_scales
    assert features.values.shape == (sum(len(m) for m in molecules), (descriptor.max_degree + 1) * n * (n + 1) // 2)
    assert descriptor.n_features_ == features.values.shape[1]
    np.testing.assert_array_equal(features.numbers, np.concatenate([m.numbers for m in molecules]))
    np.testing.assert_allclose(np.linalg.norm(features.values[:-1], axis=1), 1.0)
    np.testing.assert_array_equal(features.values[-1], 0.0)  # no neighbours, no density seen
    moduli = clone(descriptor).set_params(cross_products=False).fit(molecules)
    assert moduli.n_features_ == (descriptor.max_degree + 1) * n


def test_cutoff_ignores_far_fragments():
    near, far = g2("CH3OH"), g2("H2O")
    far.positions += [0.0, 0.0, 8.0]
    gap = np.min(np.linalg.norm(near.positions[:, None] - far.positions[None], axis=-1))
    assert 6.0 < gap < 8.0  # beyond the cutoff, but within reach of the widest wavelet (2.5 Angstrom)
    descriptor = small_descriptor(cutoff=6.0)
    together = vectors(descriptor, near + far)[: len(near)]
    np.testing.assert_allclose(together, vectors(descriptor, near), atol=1e-14)
    without = small_descriptor(cutoff=None)
    assert relative_difference(vectors(without, near), vectors(without, near + far)[: len(near)]) > 1e-6


@pytest.mark.parametrize(
    "bad",
    [dict(n_scales=0), dict(max_degree=-1), dict(min_width=2.0, max_width=1.0), dict(atom_width=-0.1), dict(cutoff=0.0)],
)
def test_invalid_settings_raise(bad):
    with pytest.raises(DescriptorError):
        small_descriptor(**bad).fit([g2("H2O")])


def test_parallel_transform_matches_serial():
    molecules = [g2(name) for name in ("CH3CH2OH", "CH3OCH3", "CH3CONH2", "HCOOCH3")]
    serial = small_descriptor(chunk_size=1).fit(molecules).transform(molecules)
    parallel = small_descriptor(chunk_size=1, n_jobs=2).fit(molecules).transform(molecules)
    np.testing.assert_array_equal(serial.values, parallel.values)


def _bonded(atoms: Atoms, index: int, limit: float = 1.6) -> np.ndarray:
    distances = np.linalg.norm(atoms.positions - atoms.positions[index], axis=1)
    return np.flatnonzero((distances > 0) & (distances < limit))


def _best_rotation_rmsd(a: np.ndarray, b: np.ndarray) -> float:
    """RMSD after the best proper rotation (Kabsch), same atom order."""
    a, b = a - a.mean(0), b - b.mean(0)
    rotation, _ = Rotation.align_vectors(a, b)
    return float(np.sqrt(np.mean(np.sum((a - rotation.apply(b)) ** 2, axis=1))))


def _matched_distance(descriptor, first: Atoms, second: Atoms) -> float:
    """Largest row distance after the best one-to-one matching of same-element atoms."""
    a, b = vectors(descriptor, first), vectors(descriptor, second)
    worst = 0.0
    for z in np.unique(first.numbers):
        rows_a, rows_b = a[first.numbers == z], b[second.numbers == z]
        cost = np.linalg.norm(rows_a[:, None] - rows_b[None], axis=-1)
        picked = linear_sum_assignment(cost)
        worst = max(worst, float(cost[picked].max()))
    return worst
