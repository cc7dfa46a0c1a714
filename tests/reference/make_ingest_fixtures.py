"""Reference fixtures for lacuna's ingest tests (filters, covariance
estimators, EDF/BDF files), made with scipy, scikit-learn and pyedflib.

Run from the repository root:
    python3 -m venv /tmp/lacuna-ref && /tmp/lacuna-ref/bin/pip install -r tests/reference/requirements.txt
    /tmp/lacuna-ref/bin/python tests/reference/make_ingest_fixtures.py

Writes tests/reference/fixtures/{filters,covariance,edf_sines}.json and the
EDF/BDF files beside them. All are committed, so `cargo test` needs no
Python. Versions are pinned in requirements.txt.
"""
import json
import os

import numpy as np
import pyedflib
import scipy
import scipy.signal as ss
import sklearn
from sklearn.covariance import empirical_covariance, ledoit_wolf, oas

OUT = os.path.join(os.path.dirname(__file__), "fixtures")
RNG = np.random.default_rng(20261202)


def meta():
    return {
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "scikit-learn": sklearn.__version__,
        "pyedflib": pyedflib.__version__,
        "script": "tests/reference/make_ingest_fixtures.py",
    }


def filters():
    cases = []
    configs = [
        (4, "bandpass", [8.0, 30.0], 256.0, 1000),
        (2, "bandpass", [1.0, 40.0], 500.0, 2000),
        (3, "bandpass", [8.0, 12.0], 128.0, 600),
        (4, "lowpass", 50.0, 256.0, 800),
        (5, "lowpass", 20.0, 200.0, 500),
        (4, "highpass", 1.0, 256.0, 1500),
        (4, "bandpass", [8.0, 30.0], 256.0, 28),  # just longer than the padding
    ]
    for order, btype, wn, fs, n in configs:
        t = np.arange(n) / fs
        x = RNG.standard_normal(n) + 3.0 * np.sin(2 * np.pi * 10.0 * t) + 0.01 * np.arange(n)
        sos = ss.butter(order, wn, btype=btype, output="sos", fs=fs)
        y = ss.sosfiltfilt(sos, x)
        cases.append({
            "order": order, "btype": btype, "wn": wn, "fs": fs,
            "x": x.tolist(), "y": y.tolist(),
            "padlen": int(3 * (2 * len(sos) + 1 - min((sos[:, 2] == 0).sum(), (sos[:, 5] == 0).sum()))),
        })
    return {"meta": meta(), "cases": cases}


def covariance():
    cases = []
    for t, p in [(50, 8), (20, 30), (500, 16), (64, 64)]:
        a = RNG.standard_normal((p, p)) / np.sqrt(p)
        x = RNG.standard_normal((t, p)) @ a.T + RNG.standard_normal(p)
        lw_cov, lw_s = ledoit_wolf(x)
        oas_cov, oas_s = oas(x)
        cases.append({
            "x": x.tolist(),  # T x p
            "empirical": empirical_covariance(x).tolist(),
            "np_cov": np.cov(x.T).tolist(),
            "ledoit_wolf": lw_cov.tolist(), "ledoit_wolf_shrinkage": float(lw_s),
            "oas": oas_cov.tolist(), "oas_shrinkage": float(oas_s),
        })
    return {"meta": meta(), "cases": cases}


def edf_files():
    """Sines of known amplitude per channel, written by pyedflib as EDF,
    EDF+ (with annotations) and BDF; one channel at another rate."""
    files = []
    fs, secs = 256, 10
    amps = [50.0, 120.0, 7.5, 300.0]
    freqs = [10.0, 3.0, 22.0, 1.0]
    for name, ftype, dmin, dmax in [
        ("sines.edf", pyedflib.FILETYPE_EDF, -32768, 32767),
        ("sines_plus.edf", pyedflib.FILETYPE_EDFPLUS, -32768, 32767),
        ("sines.bdf", pyedflib.FILETYPE_BDF, -8388608, 8388607),
    ]:
        path = os.path.join(OUT, name)
        headers, data = [], []
        for c, (a, f) in enumerate(zip(amps, freqs)):
            headers.append({
                "label": f"S{c + 1}", "dimension": "uV", "sample_frequency": fs,
                "physical_min": -400.0, "physical_max": 400.0,
                "digital_min": dmin, "digital_max": dmax, "transducer": "", "prefilter": "",
            })
            tt = np.arange(fs * secs) / fs
            data.append(a * np.sin(2 * np.pi * f * tt))
        # A slow auxiliary channel at another rate: to be set aside.
        headers.append({
            "label": "AUX", "dimension": "mV", "sample_frequency": 32,
            "physical_min": -1.0, "physical_max": 1.0,
            "digital_min": dmin, "digital_max": dmax, "transducer": "", "prefilter": "",
        })
        data.append(np.zeros(32 * secs))
        w = pyedflib.EdfWriter(path, len(headers), file_type=ftype)
        w.setSignalHeaders(headers)
        if ftype == pyedflib.FILETYPE_EDFPLUS:
            w.writeAnnotation(1.5, 2.0, "left")
            w.writeAnnotation(4.25, 2.0, "right")
        w.writeSamples(data)
        w.close()
        files.append({"file": name, "resolution": 800.0 / (dmax - dmin)})
    return {
        "meta": meta(), "rate": fs, "seconds": secs, "amplitudes": amps, "frequencies": freqs,
        "channels": ["S1", "S2", "S3", "S4"], "set_aside": ["AUX"], "files": files,
        "annotations": [[1.5, 2.0, "left"], [4.25, 2.0, "right"]],
    }


def main():
    os.makedirs(OUT, exist_ok=True)
    for name, fn in [("filters", filters), ("covariance", covariance), ("edf_sines", edf_files)]:
        with open(os.path.join(OUT, name + ".json"), "w") as f:
            json.dump(fn(), f)
        print("wrote", name)


if __name__ == "__main__":
    main()
