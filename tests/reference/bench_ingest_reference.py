"""Reference ingest for lacuna's benchmark, written the way most people would
with general-purpose libraries: pyedflib reads the BDF, scipy.signal
filters each channel forward-backward (butter 4th order 8-30 Hz, sos), and
scikit-learn's OAS estimates each 2-second epoch's covariance. No dropout
detection (lacuna's end-to-end time includes it).

    python bench_ingest_reference.py RECORDING.bdf

Prints one JSON line with seconds, samples per second and peak memory (MiB).
"""
import json
import resource
import sys
import time

import numpy as np
import pyedflib
import scipy.signal as ss
from sklearn.covariance import oas


def main(path):
    t0 = time.perf_counter()
    f = pyedflib.EdfReader(path)
    n_ch = f.signals_in_file
    fs = f.getSampleFrequency(0)
    data = np.stack([f.readSignal(c) for c in range(n_ch)])
    f.close()
    read_s = time.perf_counter() - t0
    t1 = time.perf_counter()
    sos = ss.butter(4, [8.0, 30.0], btype="band", output="sos", fs=fs)
    y = ss.sosfiltfilt(sos, data, axis=1)
    win = int(2 * fs)
    covs = [oas(y[:, k:k + win].T)[0] for k in range(0, y.shape[1] - win + 1, win)]
    filt_s = time.perf_counter() - t1
    samples = data.size
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(json.dumps({
        "samples": samples,
        "epochs": len(covs),
        "read_seconds": read_s,
        "read_samples_per_s": samples / read_s,
        "extract_seconds": read_s + filt_s,
        "extract_samples_per_s": samples / (read_s + filt_s),
        "peak_rss_mib": peak,
    }))


if __name__ == "__main__":
    main(sys.argv[1])
