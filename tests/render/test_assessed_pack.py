"""A fit sent to the assessment process with its large arrays in shared memory arrives unchanged."""

from __future__ import annotations

import os
import pickle
from pathlib import Path

import numpy as np
import pytest

from twofold.core.models.study import Study
from twofold.render import assessed

SAMPLE = Path(__file__).resolve().parents[2] / "sample_studies" / "readmission_synthetic.csv"


@pytest.fixture(scope="module")
def fit():
    st = Study.from_file(SAMPLE)
    st.set_outcome("readmitted_30d")
    return st.fit(["age", "sex", "length_of_stay", "discharge_destination"])


def test_a_packed_fit_is_the_fit_and_its_shared_memory_is_freed(fit, monkeypatch):
    monkeypatch.setattr(assessed, "SHARED_FROM", 1)  # every array through shared memory, however small
    packed, blocks = assessed.pack(fit)
    assert blocks, "the arrays should have gone through shared memory"
    names = [b.name for b in blocks]
    # The pickle holds names of the blocks, not the arrays: far smaller than the plain pickle.
    assert len(packed) < len(pickle.dumps(fit, protocol=pickle.HIGHEST_PROTOCOL)) / 4
    back = pickle.loads(packed)
    for a, b in ((back.design.X, fit.design.X), (back.design.y, fit.design.y), (back.fitted, fit.fitted),
                 (back.design.rows, fit.design.rows)):
        assert a.dtype == b.dtype and np.array_equal(a, b)
        assert a.flags.c_contiguous == b.flags.c_contiguous
    assert back.llf == fit.llf and np.array_equal(back.params, fit.params)
    # The same assessment from the packed fit as from the fit itself (the assessment's own checks are elsewhere).
    direct, _ = assessed.assess_and_draw(fit)
    answer = assessed.assess_and_draw_packed(packed)
    assert answer[1], "the answer's arrays should wait in shared memory"
    via, pictures = assessed.unpack_answer(answer)
    assert via.auc.auc == direct.auc.auc and via.brier == direct.brier
    assert np.array_equal(via.influence.cooks_distance, direct.influence.cooks_distance, equal_nan=True)
    assert np.array_equal(via.roc.fpr, direct.roc.fpr) and np.array_equal(via.rows, direct.rows)
    assert set(pictures) >= {"roc", "calibration"}
    assessed.release(blocks)
    if os.path.isdir("/dev/shm"):
        assert not any(_exists(n) for n in names + answer[1])  # the fit's and the answer's memory both freed


def _exists(name: str) -> bool:
    return os.path.exists(os.path.join("/dev/shm", name.lstrip("/")))


def test_an_answer_nobody_reads_is_freed(fit, monkeypatch):
    monkeypatch.setattr(assessed, "SHARED_FROM", 1)
    packed, blocks = assessed.pack(fit)
    try:
        data, names = assessed.assess_and_draw_packed(packed)
    finally:
        assessed.release(blocks)
    assert names
    if os.path.isdir("/dev/shm"):
        assert all(_exists(n) for n in names)  # waiting to be read
    assessed.discard(names)
    assessed.discard(names)  # twice is harmless
    if os.path.isdir("/dev/shm"):
        assert not any(_exists(n) for n in names)
