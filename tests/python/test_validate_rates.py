"""Checks of scripts/validate_rates.py, which writes the resampled copies of QTDB
and LUDB behind validation/results/rates.md: the signals must be what
`scipy.signal.resample_poly` gives (the general-purpose reference the script
names) up to the 1-uV storage step, and every reference annotation must sit at
the same time with the same code, read back with the `wfdb` package."""

import importlib.util
import tempfile
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
import wfdb

from _devtools import DATA, REPO, need_data

spec = importlib.util.spec_from_file_location("validate_rates", REPO / "scripts" / "validate_rates.py")
rates = importlib.util.module_from_spec(spec)
spec.loader.exec_module(rates)


@pytest.mark.parametrize(
    "db,record,fs_out,exts",
    [
        ("ludb", "1", 1000, ["i", "ii", "v1", "v6"]),
        ("ludb", "1", 250, ["i", "avf"]),
        ("qtdb", "sel100", 500, ["atr", "q1c", "q2c"]),
    ],
)
def test_resampled_record_keeps_signal_and_annotation_times(db, record, fs_out, exts):
    need_data()
    src = wfdb.rdrecord(str(DATA / db / record))
    with tempfile.TemporaryDirectory() as d:
        dest = Path(d)
        rates.resample_db(db, fs_out, dest, records=[record])
        out = wfdb.rdrecord(str(dest / record))
        assert out.fs == fs_out
        assert out.sig_name == src.sig_name
        ratio = Fraction(fs_out) / Fraction(int(src.fs))
        up, down = ratio.numerator, ratio.denominator
        want = scipy.signal.resample_poly(src.p_signal, up, down, axis=0)
        assert out.p_signal.shape == want.shape
        # Stored at 1 uV per unit (gain 1000 per mV): at most half a step off.
        assert np.max(np.abs(out.p_signal - want)) <= 0.0005 + 1e-9
        for ext in exts:
            a = wfdb.rdann(str(DATA / db / record), ext)
            b = wfdb.rdann(str(dest / record), ext)
            assert b.symbol == a.symbol, ext
            # Same time within half a sample of the new rate.
            t_a = np.asarray(a.sample) / src.fs
            t_b = np.asarray(b.sample) / fs_out
            assert np.max(np.abs(t_a - t_b)) <= 0.5 / fs_out + 1e-12, ext
