"""Cross-check of tendline's conditioning filters and resampling against
`scipy.signal` (the reference library named in the task):

- Butterworth designs against `scipy.signal.butter(..., output='sos')` and
  their responses against `scipy.signal.sosfreqz`,
- the notch against `scipy.signal.iirnotch`,
- causal and zero-phase filtering against `scipy.signal.sosfilt` and
  `scipy.signal.sosfiltfilt`, on a synthetic signal and on QT Database leads
  read with the `wfdb` package,
- the whole conditioning chain against a chain built only from scipy designs,
- resampling against `scipy.signal.resample` and `scipy.signal.resample_poly`,
- power-line detection against the same rule computed on
  `scipy.signal.welch` spectra.

The Rust side is reached through the dev binary `dsp-dump`
(crates/dsp/src/bin/dsp-dump.rs), looked up in `$TENDLINE_BIN_DIR`
(default `<repo>/target/release`); build it with
`cargo build --release -p tendline-dsp --bin dsp-dump`.
"""

import json
import math
import os
import subprocess
from pathlib import Path

import numpy as np
import pytest
import scipy.signal as sg
import wfdb

REPO = Path(__file__).resolve().parents[2]
DATA = REPO.parent / "shared" / "data"
BIN = Path(os.environ.get("TENDLINE_BIN_DIR", REPO / "target" / "release")) / "dsp-dump"

QTDB_RECORDS = ["sel100", "sel117", "sel16265", "sele0104", "sel803", "sel30"]


def _dump(*args, signal=None):
    if not BIN.is_file():
        pytest.fail(
            f"dev binary {BIN} missing: run `cargo build --release -p tendline-dsp "
            "--bin dsp-dump` or set TENDLINE_BIN_DIR"
        )
    inp = None if signal is None else "\n".join(repr(float(v)) for v in signal)
    r = subprocess.run([str(BIN), *args], input=inp, capture_output=True, text=True, check=False)
    assert r.returncode == 0, f"dsp-dump {' '.join(args)} failed: {r.stderr}"
    return json.loads(r.stdout)


def _qtdb_lead(record, channel=0):
    if not DATA.is_dir():
        pytest.skip(f"reference data not found at {DATA}")
    rec = wfdb.rdrecord(str(DATA / "qtdb" / record), channels=[channel])
    return rec.p_signal[:, 0].astype(float), float(rec.fs)


def _synthetic(n=3000, fs=250.0, seed=1):
    rng = np.random.default_rng(seed)
    t = np.arange(n) / fs
    return (
        1.0
        + 0.5 * np.sin(2 * np.pi * 0.3 * t)
        + np.sin(2 * np.pi * 8 * t)
        + 0.2 * np.sin(2 * np.pi * 50 * t)
        + 0.3 * rng.standard_normal(n)
    )


BUTTER_CASES = [
    # (kind, order, Wn in Hz, fs, dsp-dump keys)
    ("lowpass", 1, 40.0, 250.0, ["fc=40"]),
    ("lowpass", 4, 40.0, 250.0, ["fc=40"]),
    ("lowpass", 4, 100.0, 250.0, ["fc=100"]),
    ("lowpass", 5, 100.0, 1000.0, ["fc=100"]),
    ("lowpass", 8, 15.0, 360.0, ["fc=15"]),
    ("highpass", 1, 0.5, 250.0, ["fc=0.5"]),
    ("highpass", 2, 0.5, 250.0, ["fc=0.5"]),
    ("highpass", 3, 0.67, 500.0, ["fc=0.67"]),
    ("highpass", 4, 0.5, 1000.0, ["fc=0.5"]),
    ("bandpass", 1, [5.0, 15.0], 250.0, ["lo=5", "hi=15"]),
    ("bandpass", 2, [5.0, 15.0], 250.0, ["lo=5", "hi=15"]),
    ("bandpass", 3, [0.5, 40.0], 500.0, ["lo=0.5", "hi=40"]),
    ("bandpass", 4, [8.0, 20.0], 360.0, ["lo=8", "hi=20"]),
]


@pytest.mark.parametrize("kind,order,wn,fs,keys", BUTTER_CASES)
def test_butterworth_sos_and_response_match_scipy(kind, order, wn, fs, keys):
    d = _dump("design", f"kind={kind}", f"order={order}", f"fs={fs}", *keys)
    ref = sg.butter(order, wn, btype=kind, fs=fs, output="sos")
    sos = np.array(d["sos"])
    # Same sections in the same order with the gain in the first one.
    assert sos.shape == ref.shape
    np.testing.assert_allclose(sos, ref, rtol=1e-10, atol=1e-12)
    w, h = sg.sosfreqz(ref, worN=len(d["freqs_hz"]), fs=fs)
    np.testing.assert_allclose(d["freqs_hz"], w, rtol=1e-12, atol=1e-9)
    ours = np.array(d["h_re"]) + 1j * np.array(d["h_im"])
    np.testing.assert_allclose(np.abs(ours), np.abs(h), rtol=0, atol=1e-9)
    np.testing.assert_allclose(ours, h, rtol=0, atol=1e-9)


@pytest.mark.parametrize("f0,q,fs", [(50.0, 30.0, 250.0), (60.0, 30.0, 250.0), (50.0, 10.0, 1000.0), (60.0, 35.0, 360.0)])
def test_notch_matches_scipy_iirnotch(f0, q, fs):
    d = _dump("design", "kind=notch", f"f0={f0}", f"q={q}", f"fs={fs}")
    b, a = sg.iirnotch(f0, q, fs=fs)
    np.testing.assert_allclose(np.array(d["sos"])[0], np.r_[b, a], rtol=1e-12, atol=1e-14)
    w, h = sg.freqz(b, a, worN=len(d["freqs_hz"]), fs=fs)
    ours = np.array(d["h_re"]) + 1j * np.array(d["h_im"])
    np.testing.assert_allclose(ours, h, rtol=0, atol=1e-10)


@pytest.mark.parametrize(
    "kind,order,wn,keys",
    [("lowpass", 4, 40.0, ["fc=40"]), ("highpass", 2, 0.5, ["fc=0.5"]), ("bandpass", 2, [5.0, 15.0], ["lo=5", "hi=15"])],
)
def test_causal_and_zero_phase_filtering_match_scipy(kind, order, wn, keys):
    fs = 250.0
    x = _synthetic(fs=fs)
    sos = sg.butter(order, wn, btype=kind, fs=fs, output="sos")
    scale = np.max(np.abs(x))
    y = _dump("lfilter", f"kind={kind}", f"order={order}", f"fs={fs}", *keys, signal=x)["y"]
    np.testing.assert_allclose(y, sg.sosfilt(sos, x), rtol=0, atol=1e-9 * scale)
    y = _dump("filtfilt", f"kind={kind}", f"order={order}", f"fs={fs}", *keys, signal=x)["y"]
    np.testing.assert_allclose(y, sg.sosfiltfilt(sos, x), rtol=0, atol=1e-9 * scale)
    y = _dump("filtfilt", f"kind={kind}", f"order={order}", f"fs={fs}", *keys, "padlen=400", signal=x)["y"]
    np.testing.assert_allclose(y, sg.sosfiltfilt(sos, x, padlen=400), rtol=0, atol=1e-9 * scale)


def _scipy_chain(fs, hp_hz=0.5, hp_order=2, notch_hz=None, q=30.0, lp_hz=100.0, lp_order=4):
    """The documented default chain built from scipy designs only."""
    parts = [sg.butter(hp_order, hp_hz, btype="highpass", fs=fs, output="sos")]
    if notch_hz is not None:
        b, a = sg.iirnotch(notch_hz, q, fs=fs)
        parts.append(np.r_[b, a][None, :])
    lp = min(lp_hz, 0.45 * fs)
    parts.append(sg.butter(lp_order, lp, btype="lowpass", fs=fs, output="sos"))
    sos = np.vstack(parts)
    padlen = max(3 * (2 * len(sos) + 1), math.ceil(fs / hp_hz))
    return sos, padlen


@pytest.mark.parametrize("record", QTDB_RECORDS[:3])
@pytest.mark.parametrize("powerline", ["50", "60", "off"])
def test_conditioning_chain_matches_scipy_on_qtdb(record, powerline):
    x, fs = _qtdb_lead(record)
    x = x[: int(60 * fs)]  # one minute keeps the text transfer small
    cfg = json.dumps({"powerline": powerline})
    d = _dump("condition", f"fs={fs}", f"config={cfg}", signal=x)
    notch = None if powerline == "off" else float(powerline)
    assert d["notch_hz"] == notch
    sos, padlen = _scipy_chain(fs, notch_hz=notch)
    assert d["padlen"] == padlen
    np.testing.assert_allclose(np.array(d["sos"]), sos, rtol=1e-10, atol=1e-12)
    ref = sg.sosfiltfilt(sos, x, padlen=padlen)
    np.testing.assert_allclose(d["y"], ref, rtol=0, atol=1e-9 * np.max(np.abs(x)))


@pytest.mark.parametrize("fs_out", [500.0, 1000.0, 360.0, 200.0])
def test_resample_fft_matches_scipy_on_qtdb(fs_out):
    x, fs = _qtdb_lead("sel100")
    for n in (5000, 5001):
        seg = x[:n]
        y = _dump("resample", f"fs_in={fs}", f"fs_out={fs_out}", signal=seg)["y"]
        ref = sg.resample(seg, int(round(n * fs_out / fs)))
        np.testing.assert_allclose(y, ref, rtol=0, atol=1e-10)


@pytest.mark.parametrize("up,down", [(2, 1), (4, 1), (1, 4), (36, 25), (25, 36), (4, 5)])
def test_resample_poly_matches_scipy_on_qtdb(up, down):
    x, _ = _qtdb_lead("sel117")
    for n in (5000, 5001):
        seg = x[:n]
        y = _dump("resample_poly", f"up={up}", f"down={down}", signal=seg)["y"]
        ref = sg.resample_poly(seg, up, down)
        assert len(y) == len(ref)
        np.testing.assert_allclose(y, ref, rtol=0, atol=1e-10)


def _welch_decision(x, fs, ratio=10.0):
    """The documented auto-detection rule, computed on a scipy Welch PSD:
    4 s Hann segments, 50 % overlap, mean removed; peak within ±1 Hz of the
    line over the 90th percentile of the bins 2–6 Hz away."""
    nseg = min(len(x), int(round(4 * fs)))
    f, p = sg.welch(x, fs=fs, window="hann", nperseg=nseg, noverlap=nseg // 2, detrend="constant")
    best = None
    ratios = {}
    for line in (50.0, 60.0):
        if line + 6.0 > f[-1]:
            continue
        d = np.abs(f - line)
        peak = p[d <= 1.0].max()
        neigh = np.sort(p[(d >= 2.0) & (d <= 6.0)])
        refv = neigh[min(len(neigh) * 9 // 10, len(neigh) - 1)]
        r = peak / refv
        ratios[line] = r
        if r >= ratio and (best is None or r > ratios[best]):
            best = line
    return best, ratios


@pytest.mark.parametrize("record", QTDB_RECORDS)
def test_powerline_detection_agrees_with_scipy_welch(record):
    x, fs = _qtdb_lead(record)
    x = x[: int(120 * fs)]
    want, ratios = _welch_decision(x, fs)
    if any(abs(math.log(r / 10.0)) < 0.1 for r in ratios.values()):
        pytest.skip(f"{record}: ratio {ratios} too close to the threshold to compare decisions")
    got = _dump("detect", f"fs={fs}", signal=x)["notch_hz"]
    assert got == want, f"{record}: ratios {ratios}"


def test_detection_finds_injected_mains_on_qtdb():
    x, fs = _qtdb_lead("sel100")
    x = x[: int(120 * fs)]
    t = np.arange(len(x)) / fs
    for line in (50.0, 60.0):
        y = x + 0.05 * np.sin(2 * np.pi * (line + 0.2) * t)
        assert _dump("detect", f"fs={fs}", signal=y)["notch_hz"] == line
        assert _welch_decision(y, fs)[0] == line


def _records(db):
    if not DATA.is_dir():
        pytest.skip(f"reference data not found at {DATA}")
    return (DATA / db / "RECORDS").read_text().split()


def test_qtdb_mains_is_never_called_50hz():
    # The QT Database excerpts come from recordings made in the USA, where the
    # mains frequency is 60 Hz (from memory): auto-detection on every record
    # (lead 0, first 5 minutes) must never answer 50 Hz, and 60 Hz
    # interference should be found in some of them.
    found = {}
    for record in _records("qtdb"):
        x, fs = _qtdb_lead(record)
        x = np.nan_to_num(x[: int(300 * fs)])
        found[record] = _dump("detect", f"fs={fs}", signal=x)["notch_hz"]
    fifty = [r for r, f in found.items() if f == 50.0]
    sixty = [r for r, f in found.items() if f == 60.0]
    assert not fifty, f"50 Hz reported for US recordings: {fifty}"
    assert len(sixty) >= 3, f"60 Hz interference found only in {sixty}"


def test_ludb_mains_is_never_called_60hz():
    # LUDB was recorded in Nizhny Novgorod, Russia, where the mains frequency
    # is 50 Hz (from memory): no lead of any record may be called 60 Hz.
    sixty = []
    for record in _records("ludb"):
        rec = wfdb.rdrecord(str(DATA / "ludb" / record))
        for i in range(rec.n_sig):
            x = np.nan_to_num(rec.p_signal[:, i])
            if _dump("detect", f"fs={rec.fs}", signal=x)["notch_hz"] == 60.0:
                sixty.append((record, rec.sig_name[i]))
    assert not sixty, f"60 Hz reported for Russian recordings: {sixty}"


@pytest.mark.parametrize("record", QTDB_RECORDS[:3])
@pytest.mark.parametrize("up", [2, 4])
def test_conditioning_is_nearly_invariant_to_sampling_rate(record, up):
    # Conditioning a 250 Hz lead, or up-sampling it with scipy.signal.resample_poly,
    # conditioning at 500/1000 Hz and coming back, must give nearly the same
    # signal: the 100 Hz low-pass and 0.5 Hz high-pass are the same band at
    # every rate. Residual differences come from the bilinear warping near
    # 100 Hz and from resample_poly's own transition band near 125 Hz.
    # Tolerances are ours: 2 % relative RMS and, for the largest single
    # difference (found on the sharpest QRS complexes), 3 % of the largest
    # conditioned amplitude (sel16265: 0.08 mV against 3.3 mV measured).
    x, fs = _qtdb_lead(record)
    x = x[: int(60 * fs)]
    cfg = json.dumps({"powerline": "off"})
    y = np.array(_dump("condition", f"fs={fs}", f"config={cfg}", signal=x)["y"])
    xu = sg.resample_poly(x, up, 1)
    yu = np.array(_dump("condition", f"fs={fs * up}", f"config={cfg}", signal=xu)["y"])
    yb = sg.resample_poly(yu, 1, up)
    inner = slice(int(2 * fs), -int(2 * fs))
    d = yb[inner] - y[inner]
    rel = np.sqrt(np.mean(d**2) / np.mean(y[inner] ** 2))
    assert rel < 0.02, rel
    assert np.max(np.abs(d)) < 0.03 * np.max(np.abs(y[inner])), (np.max(np.abs(d)), np.max(np.abs(y[inner])))
