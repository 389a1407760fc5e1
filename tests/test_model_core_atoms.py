"""The core's copy of a model's atoms is built once per model and never travels with it."""

import pickle

import numpy as np

import kinemap as km


def test_core_atoms_are_built_once_and_left_out_of_pickles():
    rng = np.random.default_rng(0)
    model = km.Model(rng.uniform(0, 10, (500, 3)), rng.choice(["Fe", "Ni"], 500), b_iso={"Fe": 0.2, "Ni": 0.4})
    line = km.QGrid.line([0.1, 0.2, 0.3], [3.0, 1.0, -0.5], 64)
    first = km.scatter(model, line, method="exact").amplitude
    groups, atoms = model.core_atoms()
    assert model.core_atoms()[1] is atoms and atoms.n_atoms == 500 and atoms.n_groups == groups.n_groups == 2
    again = km.scatter(model, line, method="exact").amplitude
    np.testing.assert_array_equal(again, first)
    copy = pickle.loads(pickle.dumps(model))
    assert copy._core_atoms is None
    np.testing.assert_array_equal(km.scatter(copy, line, method="exact").amplitude, first)
    # Reference for the sums themselves: the direct sum with numpy (f from the same probe).
    q = line.q_vectors()
    s = np.linalg.norm(q, axis=1) / (4 * np.pi)
    f = km.get_probe("xray").scattering_factors(["Fe", "Ni"], s)
    b = np.where(model.species == "Fe", 0.2, 0.4)
    lab = (model.species == "Ni").astype(int)
    want = (f[lab].T * np.exp(-np.outer(s * s, b)) * np.exp(1j * q @ model.positions.T)).sum(axis=1)
    np.testing.assert_allclose(first, want, rtol=1e-10, atol=1e-9 * np.abs(want).max())


def test_pieces_take_their_labels_from_the_whole_model():
    # A piece without some species lists only the labels it has, with the right counts and
    # groups; reference: counting the labels of the piece directly.
    species = np.array(["O"] * 5 + ["Fe"] * 3 + ["Ni"] * 4 + ["Fe"] * 2)
    model = km.Model(np.arange(42.0).reshape(14, 3), species, b_iso={"Fe": 0.1, "Ni": 0.2, "O": 0.3})
    for index in (slice(5, 12), slice(0, 5), np.array([13, 0, 8]), species != "Fe"):
        piece = model.subset(index)
        labels, counts = np.unique(species[index], return_counts=True)
        assert piece.species_counts() == dict(zip(labels.tolist(), counts.tolist()))
        g = piece.groups()
        assert [g.labels[i] for i in g.index] == species[index].tolist()
        assert np.array_equal(g.b_iso[g.index], piece.b_iso)
