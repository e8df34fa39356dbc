"""The adjacency search's candidate enumeration: the array paths follow one definition.

The separating set kept for a pair is the first independent one in a fixed enumeration:
subsets of x's neighbours, then new ones of y's, each side's candidates ranked strongest
first and its k-subsets taken in colexicographic order. The search builds that order as
arrays, a round at a time; these checks hold the arrays to a plain Python definition written
here (itertools.combinations sorted by their reversed tuples is colex order, by definition).
"""

from itertools import combinations

import numpy as np
import pytest

from discovery.search._skeleton import (_SATURATE, _LevelSets, _candidate_keys,
                                        _level_one_candidates, _pruned_candidates,
                                        _ranked_candidates, _side_orders, _sort_rows,
                                        _weakness_codes)


def colex(items, k):
    """k-subsets of ``items`` in colex order: by largest position, then the next, ..."""
    return sorted(combinations(range(len(items)), k), key=lambda c: c[::-1])


def reference_sets(side_x, side_y, k):
    """The enumeration's definition: x's side, then y's sets not inside adj(x)."""
    out = [tuple(sorted(side_x[i] for i in c)) for c in colex(side_x, k)]
    in_x = set(side_x)
    out += [tuple(sorted(side_y[i] for i in c)) for c in colex(side_y, k)
            if not in_x.issuperset(side_y[i] for i in c)]
    return out


def ranked_sides(pairs, frozen, weakness):
    return [[order[i, :counts[i]].tolist() for i in range(len(pairs))]
            for _, counts, order in _side_orders(pairs, frozen, weakness)]


def random_state(seed, n=40, density=0.3):
    rng = np.random.default_rng(seed)
    upper = np.triu(rng.random((n, n)) < density, 1)
    frozen = upper | upper.T
    association = rng.random((n, n))
    association[rng.random((n, n)) < 0.2] = 0.5  # ties, broken by index
    association = np.maximum(association, association.T)
    pairs = np.argwhere(np.triu(frozen, 1))
    return frozen, _weakness_codes(association), pairs


def test_ranked_sides_follow_the_association_then_the_name():
    frozen, weakness, pairs = random_state(4)
    side_x, side_y = ranked_sides(pairs, frozen, weakness)
    for i, (x, y) in enumerate(pairs.tolist()):
        for side, own in ((side_x[i], x), (side_y[i], y)):
            assert set(side) == set(np.flatnonzero(frozen[own]).tolist()) - {x, y}
            keys = [(max(weakness[x, z], weakness[y, z]), z) for z in side]
            assert keys == sorted(keys)


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("level", [2, 3, 4])
def test_level_sets_follow_the_definition(seed, level):
    frozen, weakness, pairs = random_state(seed)
    sets = _LevelSets(pairs, frozen, weakness, level)
    side_x, side_y = ranked_sides(pairs, frozen, weakness)
    everyone = np.ones(len(pairs), dtype=bool)
    idx, owner = sets.batch(everyone, 0, _SATURATE)
    for i, (x, y) in enumerate(pairs.tolist()):
        rows = idx[owner == i]
        assert (rows[:, :2] == (x, y)).all()
        assert [tuple(r) for r in rows[:, 2:].tolist()] == \
            reference_sets(side_x[i], side_y[i], level)
    # built a round at a time, the same sets come out in the same order
    pieces = [sets.batch(everyone, lo, hi) for lo, hi in ((0, 1), (1, 3), (3, 11),
                                                           (11, _SATURATE))]
    for i in range(len(pairs)):
        rows = np.concatenate([p_idx[p_owner == i] for p_idx, p_owner in pieces])
        assert (rows == idx[owner == i]).all()
    assert sets.left(everyone, 0) >= len(idx)


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
    side_x, side_y = ranked_sides(pairs, frozen, weakness)
    for i in range(len(pairs)):
        dense = np.argsort(key[i])[:count[i]].tolist()
        assert idx[owner == i, 2].tolist() == dense
        assert rank[owner == i].tolist() == list(range(count[i]))
        # and the definition at level 1, restricted to the candidates left
        kept = set(np.flatnonzero(candidate[i]).tolist())
        defined = [s[0] for s in reference_sets(side_x[i], side_y[i], 1) if s[0] in kept]
        assert dense == defined


@pytest.mark.parametrize("k", range(0, 9))
def test_rows_sorted_like_numpy(k):
    # Reference: numpy.sort along rows.
    rows = np.random.default_rng(k).integers(0, 40, size=(500, k))
    assert (_sort_rows(rows) == np.sort(rows, axis=1)).all()
