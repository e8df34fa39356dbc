"""The separating-set record of the adjacency search: a mapping kept as arrays."""

import numpy as np
import pytest

from discovery.search._skeleton import SeparatingSets


@pytest.mark.parametrize("n_vars", [40, 5000])  # dense table, and sorted keys past 4,096
def test_records_read_back_like_a_dict(n_vars):
    rng = np.random.default_rng(n_vars)
    pairs = set()
    while len(pairs) < 300:
        a, b = sorted(rng.choice(n_vars, 2, replace=False).tolist())
        pairs.add((a, b))
    pairs = sorted(pairs, key=lambda p: rng.random())
    expected = {}
    record = SeparatingSets(n_vars)
    for size, chunk in ((0, pairs[:100]), (1, pairs[100:180]), (2, pairs[180:])):
        rows = np.array([[a, b, *rng.choice(n_vars, size, replace=False).tolist()]
                         for a, b in chunk], dtype=np.intp).reshape(-1, size + 2)
        p = rng.random(len(rows))
        record.record(rows, p)
        expected.update({(int(r[0]), int(r[1])): (tuple(r[2:].tolist()), float(q))
                         for r, q in zip(rows, p)})
    assert len(record) == len(expected)
    assert dict(record.items()) == expected
    assert sorted(record) == sorted(expected)
    some = pairs[::7]
    assert record.many(some) == [expected[p] for p in some]
    assert record[pairs[5]] == expected[pairs[5]]
    missing = next((a, a + 1) for a in range(n_vars) if (a, a + 1) not in expected)
    with pytest.raises(KeyError):
        record[missing]
