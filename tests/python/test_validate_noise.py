"""Checks of scripts/validate_noise.py, which writes the noisy copies of QTDB and
LUDB behind validation/results/noise.md: the noise added to every lead must
have the signal-to-noise ratio asked for by the script's stated measure
(QRS peak-to-peak amplitude A from 1-s blocks, S = A^2/8, over the noise's mean
square; the `nst` convention of the WFDB software, from memory), recomputed
here with numpy from the records read back with the `wfdb` package; its power
must lie in the band each noise model names (Welch spectrum, `scipy.signal`);
and the reference annotations must be the original files, byte for byte."""

import importlib.util
import tempfile
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
import wfdb

from _devtools import DATA, REPO, need_data

spec = importlib.util.spec_from_file_location("validate_noise", REPO / "scripts" / "validate_noise.py")
noise = importlib.util.module_from_spec(spec)
spec.loader.exec_module(noise)

# (kind, band in Hz holding at least 90 % of the noise power)
BANDS = {"muscle": (1.0, 100.0), "motion": (0.5, 10.0), "baseline": (0.0, 0.6)}


def amplitude(x, fs):
    n = int(fs)
    b = x[: len(x) // n * n].reshape(-1, n)
    return float(np.median(b.max(axis=1) - b.min(axis=1)))


@pytest.mark.parametrize(
    "db,record,kind,snr,exts",
    [
        ("ludb", "1", "muscle", 12.0, ["i", "v1"]),
        ("ludb", "2", "motion", 18.0, ["ii"]),
        ("qtdb", "sel100", "baseline", 6.0, ["atr", "q1c"]),
    ],
)
def test_noise_has_the_snr_and_band_asked_for(db, record, kind, snr, exts):
    need_data()
    src = wfdb.rdrecord(str(DATA / db / record))
    with tempfile.TemporaryDirectory() as d:
        dest = Path(d)
        noise.noisy_db(db, kind, snr, dest, records=[record])
        out = wfdb.rdrecord(str(dest / record))
        assert out.fs == src.fs and out.sig_name == src.sig_name
        for j in range(src.n_sig):
            x = src.p_signal[:, j]
            added = out.p_signal[:, j] - x
            a = amplitude(x, src.fs)
            got = 10 * np.log10((a * a / 8) / np.mean((added - added.mean()) ** 2))
            # Stored at 1 uV per unit: the rounding adds at most 0.5 uV.
            assert abs(got - snr) < 0.05, (src.sig_name[j], got)
            f, p = scipy.signal.welch(added, fs=src.fs, nperseg=min(len(added), int(src.fs * 20)))
            lo, hi = BANDS[kind]
            share = p[(f >= lo) & (f <= hi)].sum() / p.sum()
            assert share >= 0.9, (src.sig_name[j], kind, share)
        for ext in exts:
            assert (dest / f"{record}.{ext}").read_bytes() == (DATA / db / f"{record}.{ext}").read_bytes()


def test_noise_is_repeatable_and_differs_between_leads():
    need_data()
    x = wfdb.rdrecord(str(DATA / "ludb" / "1")).p_signal[:, 0]
    a, _ = noise.scaled_noise(x, 500.0, 12.0, "muscle", "1", "i")
    b, _ = noise.scaled_noise(x, 500.0, 12.0, "muscle", "1", "i")
    c, _ = noise.scaled_noise(x, 500.0, 12.0, "muscle", "1", "ii")
    assert np.array_equal(a, b)
    assert abs(np.corrcoef(a, c)[0, 1]) < 0.1
