"""The adjacency search's candidate enumeration: the array paths follow the one definition.

The separating set kept for a pair is the first independent one in a fixed enumeration
(subsets of x's neighbours, then new ones of y's, strongest candidates first). Large levels
build it as arrays; these checks hold the arrays to the plain Python generator of
``_candidate_sets`` (itertools.combinations order).
"""

import numpy as np
import pytest

from discovery.search._skeleton import (_candidate_sets, _flat_candidate_sets,
                                        _level_one_candidates, _candidate_keys,
                                        _pruned_candidates, _ranked_candidates,
                                        _ranked_sides, _weakness_codes)


def random_state(seed, n=40, density=0.3):
    rng = np.random.default_rng(seed)
    upper = np.triu(rng.random((n, n)) < density, 1)
    frozen = upper | upper.T
    association = rng.random((n, n))
    association = (association + association.T) / 2
    association[rng.random((n, n)) < 0.2] = 0.5  # ties, broken by index
    association = np.maximum(association, association.T)
    pairs = np.argwhere(np.triu(frozen, 1))
    return frozen, _weakness_codes(association), pairs


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("level", [2, 3])
def test_flat_sets_follow_the_generator(seed, level):
    frozen, weakness, pairs = random_state(seed)
    idx, owner, rank = _flat_candidate_sets(pairs, frozen, weakness, level)
    side_x, side_y = _ranked_sides(pairs, frozen, weakness)
    for i, (x, y) in enumerate(pairs):
        rows = idx[owner == i]
        assert (rows[:, :2] == (x, y)).all()
        assert rank[owner == i].tolist() == list(range(len(rows)))
        expected = list(_candidate_sets(side_x[i], side_y[i], level))
        assert [tuple(r) for r in rows[:, 2:].tolist()] == expected


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_flat_level_one_follows_the_dense_ranking(seed):
    frozen, weakness, pairs = random_state(seed)
    rng = np.random.default_rng(seed)
    possible = rng.random((len(pairs), frozen.shape[0])) < 0.7  # what a shortcut leaves
    row_of = {tuple(p): i for i, p in enumerate(pairs.tolist())}
    entries = _pruned_candidates(  # in blocks of 7 pairs, as the search sends them
        pairs, frozen, lambda sub: possible[[row_of[tuple(p)] for p in sub.tolist()]],
        block=7)
    candidate, on_x = _level_one_candidates(pairs, frozen)
    candidate &= possible
    count = candidate.sum(axis=1)
    (first, first_owner), rest = _ranked_candidates(pairs, *entries, weakness)
    others, other_owner, other_rank = rest(np.ones(len(pairs), dtype=bool))
    idx = np.concatenate([first, others])
    owner = np.concatenate([first_owner, other_owner])
    rank = np.concatenate([np.zeros(len(first), dtype=int), other_rank])
    order = np.lexsort((rank, owner))
    idx, owner, rank = idx[order], owner[order], rank[order]
    key = _candidate_keys(pairs, candidate, on_x, weakness)
    side_x, side_y = _ranked_sides(pairs, frozen, weakness)
    for i in range(len(pairs)):
        dense = np.argsort(key[i])[:count[i]].tolist()
        assert idx[owner == i, 2].tolist() == dense
        assert rank[owner == i].tolist() == list(range(count[i]))
        # and the same order as the generator at level 1, restricted to the candidates left
        kept = set(np.flatnonzero(candidate[i]).tolist())
        generated = [s[0] for s in _candidate_sets(side_x[i], side_y[i], 1) if s[0] in kept]
        assert dense == generated


@pytest.mark.parametrize("k", range(0, 9))
def test_rows_sorted_like_numpy(k):
    # Reference: numpy.sort along rows.
    from discovery.search._skeleton import _sort_rows
    rows = np.random.default_rng(k).integers(0, 40, size=(500, k))
    assert (_sort_rows(rows) == np.sort(rows, axis=1)).all()
