"""Seed corpus for tests/fuzz (small valid inputs for every reader).

    target/ref/bin/python tests/fuzz/make_corpus.py

Uses numpy and pyedflib (versions pinned in tests/reference/requirements.txt).
"""
import os

import numpy as np
import pyedflib

HERE = os.path.join(os.path.dirname(__file__), "corpus")
rng = np.random.default_rng(7)


def edf(name, ftype, fs, secs, annotate):
    path = os.path.join(HERE, "edf", name)
    n = 3
    headers = [{
        "label": f"C{c}", "dimension": "uV", "sample_frequency": fs,
        "physical_min": -100.0, "physical_max": 100.0,
        "digital_min": -32768 if ftype in (pyedflib.FILETYPE_EDF, pyedflib.FILETYPE_EDFPLUS) else -8388608,
        "digital_max": 32767 if ftype in (pyedflib.FILETYPE_EDF, pyedflib.FILETYPE_EDFPLUS) else 8388607,
        "transducer": "", "prefilter": "",
    } for c in range(n)]
    w = pyedflib.EdfWriter(path, n, file_type=ftype)
    w.setSignalHeaders(headers)
    if annotate:
        w.writeAnnotation(0.5, 1.0, "a")
        w.writeAnnotation(1.25, -1, "b")
    w.writeSamples([20 * rng.standard_normal(fs * secs) for _ in range(n)])
    w.close()


edf("small.edf", pyedflib.FILETYPE_EDF, 16, 2, False)
edf("small_plus.edf", pyedflib.FILETYPE_EDFPLUS, 16, 3, True)
edf("small.bdf", pyedflib.FILETYPE_BDF, 8, 2, False)
edf("small_plus.bdf", pyedflib.FILETYPE_BDFPLUS, 8, 2, True)

npy = os.path.join(HERE, "npy")
a = rng.standard_normal((3, 4, 6))
stack = np.einsum("nij,nkj->nik", a, a) / 6
np.save(os.path.join(npy, "stack_f64.npy"), stack)
np.save(os.path.join(npy, "stack_fortran.npy"), np.asfortranarray(stack))
np.save(os.path.join(npy, "epochs_f32.npy"), rng.standard_normal((2, 3, 10)).astype(np.float32))
np.save(os.path.join(npy, "mask_u8.npy"), (rng.random((3, 4)) > 0.2).astype(np.uint8))
np.save(os.path.join(npy, "mask_bool.npy"), rng.random((3, 4)) > 0.2)
with open(os.path.join(npy, "stack_v2.npy"), "wb") as f:
    np.lib.format.write_array(f, stack, version=(2, 0))

with open(os.path.join(HERE, "signal-csv", "signal.csv"), "w") as f:
    f.write("A,B,C\n")
    for row in rng.standard_normal((12, 3)):
        f.write(",".join(f"{v:.4f}" for v in row) + "\n")
    f.write("1.0,,nan\n")
with open(os.path.join(HERE, "events-csv", "events.csv"), "w") as f:
    f.write("onset,duration,label\n0.5,2,rest\n3.0,2,task\n6.25,2.5,rest\n")
with open(os.path.join(HERE, "events-csv", "events_no_duration.csv"), "w") as f:
    f.write("label,onset\nx,1\ny,2.5\n")
with open(os.path.join(HERE, "mask-csv", "mask.csv"), "w") as f:
    f.write("Fz,Cz,Pz,Oz\n1,1,0,1\n1,1,1,1\n0,1,1,1\n")
print("corpus written")
