"""One root encoding (explorer.core.loop.root_to_json / root_from_json): exact round trip
of every double, the older [re, im] trial-record form still read, bad values refused."""

from __future__ import annotations

import json

import numpy as np
import pytest

from explorer.core.loop import root_from_json, root_to_json


def test_round_trip_is_exact_through_json_text() -> None:
    rng = np.random.default_rng(3)
    pairs = rng.standard_normal((200, 2)) * 10.0 ** rng.integers(-8, 8, (200, 2))
    values = [complex(a, b) for a, b in pairs]
    values += [complex(x, 0.0) for x in rng.standard_normal(50)] + [0j, -0.0 + 0j, 1e-300 + 1e300j]
    for v in values:
        back = root_from_json(json.loads(json.dumps(root_to_json(v))))
        assert back == v  # bit-exact: 17 significant digits round-trip a double


def test_real_roots_are_numbers_and_complex_ones_strings() -> None:
    assert root_to_json(-2.5 + 0j) == -2.5
    assert isinstance(root_to_json(-2 + 3j), str)
    assert root_from_json("-2+3j") == -2 + 3j
    assert root_from_json(" -2 + 3j ") == -2 + 3j


def test_older_pairs_still_read() -> None:
    assert root_from_json([-0.5, 1.25]) == -0.5 + 1.25j


@pytest.mark.parametrize("bad", [None, True, "abc", [1.0], {"re": 1}])
def test_bad_values_refused(bad) -> None:
    with pytest.raises((ValueError, TypeError)):
        root_from_json(bad)
