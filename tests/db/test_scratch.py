"""The run's worth files (store/scratch.py): matrices written per chunk and read back by scenario
block, with a profitability index that follows from the present worth stored as one investment
PW per project.

Source of the identity: PI = 1 + PW / PW(investment) (C. S. Park, Contemporary Engineering
Economics, ch. on capital budgeting; from memory); the engine's own kernel is the reference.
"""
import numpy as np
import pytest

from ratescape.evaluate.compiled import index_and_fixed_investment
from ratescape.store.worth_files import INVESTMENT, WorthFiles, index_is_derivable


def _chunk(rng, S, P, varying=()):
    """PW and investment PW (S, P) of invented projects: a fixed outlay, except the ``varying``
    columns (an outlay that differs by scenario) and column 0 (no investment: no PI)."""
    pw = rng.normal(0.0, 1e5, size=(S, P))
    outlay = np.tile(-rng.uniform(1e4, 1e6, size=P), (S, 1))
    outlay[:, 0] = 0.0
    for c in varying:
        outlay[:, c] *= np.linspace(0.9, 1.1, S)
    pi, fixed = index_and_fixed_investment(pw, outlay)
    return pw, pi, fixed


@pytest.mark.parametrize("varying", [(), (3,)])
def test_a_derivable_index_reads_back_bit_for_bit(tmp_path, varying):
    """Chunks whose PI follows from PW keep a (P,) investment file instead of the (S, P) matrix;
    what is read back (whole chunk or scenario block) equals the engine's PI exactly."""
    rng = np.random.default_rng(5)
    S, P, size = 7, 10, 4
    scratch = WorthFiles(tmp_path, S, P, size)
    chunks = [_chunk(rng, S, scratch.chunk_width(c), varying if c == 1 else ()) for c in range(3)]
    for c, (pw, pi, fixed) in enumerate(chunks):
        scratch.write(c, pw, pi, investment=fixed)
    stored = [scratch.stores_index(c) for c in range(3)]
    assert stored == [False, bool(varying), False]
    for c in range(3):
        assert (tmp_path / f"{INVESTMENT}-{c:07d}.f8").is_file() == (not stored[c])
        np.testing.assert_array_equal(scratch.read_chunk("pi", c), chunks[c][1])      # NaN where no PI
    want_pw = np.hstack([ch[0] for ch in chunks])
    want_pi = np.hstack([ch[1] for ch in chunks])
    for a, b in ((0, S), (2, 5), (6, 7)):
        worth = scratch.read_block("pw", a, b)
        np.testing.assert_array_equal(worth, want_pw[a:b])
        np.testing.assert_array_equal(scratch.read_block("pi", a, b), want_pi[a:b])
        np.testing.assert_array_equal(scratch.read_block("pi", a, b, worth=worth), want_pi[a:b])
    assert scratch.missing() == []


def test_missing_files_of_either_kind_are_reported_and_a_rewrite_switches_kind(tmp_path):
    rng = np.random.default_rng(6)
    scratch = WorthFiles(tmp_path, 5, 4, 4)
    pw, pi, fixed = _chunk(rng, 5, 4)
    scratch.write(0, pw, pi, investment=fixed)
    assert scratch.missing() == []
    (tmp_path / f"{INVESTMENT}-0000000.f8").write_bytes(b"short")
    assert scratch.missing() == [0]
    pw, pi, fixed = _chunk(rng, 5, 4, varying=(2,))        # rebuilt, now with a varying outlay
    scratch.write(0, pw, pi, investment=fixed)
    assert scratch.stores_index(0) and not (tmp_path / f"{INVESTMENT}-0000000.f8").exists()
    np.testing.assert_array_equal(scratch.read_chunk("pi", 0), pi)
    (tmp_path / "pi-0000000.f8").unlink()
    assert scratch.missing() == [0]
    scratch.write(0, pw, pi)                                # no investment given: the matrix is kept
    assert scratch.stores_index(0) and scratch.missing() == []


def test_index_is_derivable_needs_a_fixed_investment_or_no_index_at_all():
    pi = np.array([[1.2, np.nan, 0.9], [1.1, np.nan, np.nan]])
    assert index_is_derivable(pi, np.array([10.0, np.nan, 5.0]))
    assert not index_is_derivable(pi, np.array([10.0, np.nan, np.nan]))     # column 2 has a PI once


def test_worth_files_travel_to_workers_without_their_lock(tmp_path):
    """The plan (with its worth files) is pickled for Dask workers."""
    import pickle
    scratch = WorthFiles(tmp_path, 3, 2, 2)
    copy = pickle.loads(pickle.dumps(scratch))
    assert copy.folder == scratch.folder and copy.missing() == [0]
