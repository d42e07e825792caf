"""The real-time scored window: only forecasts made before the origin with a truth out by then."""

from __future__ import annotations

import numpy as np
import pytest

from harness.pools import scored_window

NAT = np.datetime64("NaT")


def _reference(origins, release, scorable, window):
    """Loop over origins and cells: the rule written out literally."""
    o, v, h = scorable.shape
    out = {}
    for i in range(o):
        for j in range(v):
            for k in range(h):
                known = [p for p in range(i) if scorable[p, j, k] and not np.isnat(release[p, j, k])
                         and release[p, j, k] <= origins[i]]
                out[i, j, k] = known if window is None else known[-window:]
    return out


@pytest.mark.parametrize("window", [None, 1, 3])
def test_window_matches_the_rule_written_as_a_loop(window):
    """Index and count equal a literal loop: o' < o, release on or before o, scorable, last W."""
    rng = np.random.default_rng(3)
    o, v, h = 15, 2, 3
    origins = np.datetime64("2010-01-01") + 30 * np.arange(o)
    release = origins[:, None, None] + rng.integers(-10, 120, (o, v, h))
    release = np.where(rng.random((o, v, h)) < 0.2, NAT, release)
    scorable = rng.random((o, v, h)) < 0.85
    index, count = scored_window(origins, release, scorable, window)
    ref = _reference(origins, release, scorable, window)
    for (i, j, k), known in ref.items():
        assert count[i, j, k] == len(known)
        got = index[i, j, k]
        assert list(got[got >= 0]) == known
        assert (got[len(known):] == -1).all()


def test_a_truth_released_on_the_origin_day_is_known_that_day():
    """A value released on day d is known from d on (DESIGN glossary): release == origin counts."""
    origins = np.array(["2020-01-01", "2020-02-01", "2020-03-01"], dtype="datetime64[D]")
    release = np.array([["2020-02-01"], ["2020-03-02"], [NAT]], dtype="datetime64[D]")[:, :, None]
    index, count = scored_window(origins, release, np.ones((3, 1, 1), bool))
    assert count[:, 0, 0].tolist() == [0, 1, 1]  # origin 2 does not see the 2020-03-02 release
    assert index[2, 0, 0, 0] == 0


def test_window_width_depends_on_shapes_only():
    """The padded width is min(W, O - 1), whatever the data (so no cell's arithmetic varies)."""
    origins = np.datetime64("2020-01-01") + np.arange(6)
    release = np.full((6, 1, 1), NAT, dtype="datetime64[D]")
    assert scored_window(origins, release, np.zeros((6, 1, 1), bool), None)[0].shape[-1] == 5
    assert scored_window(origins, release, np.zeros((6, 1, 1), bool), 3)[0].shape[-1] == 3
