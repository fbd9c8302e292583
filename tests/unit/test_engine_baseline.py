"""The regression rules give the same bits after an engine change.

The reference file was written by tests/data/make_engine_baseline.py before the
treatment-effect rule was added to the engine; a new rule must leave the existing ones
unchanged to the bit.
"""

import importlib.util
from pathlib import Path

import numpy as np

DATA = Path(__file__).resolve().parents[1] / "data"


def _maker():
    spec = importlib.util.spec_from_file_location("make_engine_baseline",
                                                  DATA / "make_engine_baseline.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_regression_forests_bit_identical_to_recorded():
    ref = np.load(DATA / "engine_baseline.npz")
    now = _maker().predictions()
    assert sorted(now) == sorted(ref.files)
    for name in ref.files:
        np.testing.assert_array_equal(now[name], ref[name], err_msg=name)
