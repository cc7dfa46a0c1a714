"""Hostile and real-world EDF+ files for lacuna's reader tests.

Run from the repository root (see make_fixtures.py for the venv):
    /tmp/lacuna-ref/bin/python tests/reference/make_hostile_edf.py

1. Fetches pyEDFlib 0.1.42's wheel from PyPI (pip download, pinned) and takes
   its test file pyedflib/tests/data/test_subsecond.edf (BSD-licensed test
   data of that general-purpose EDF library), whose first data record starts
   at +0.3945312 s; records its annotations as read by pyedflib (onsets
   relative to the first sample) in subsecond.json.
2. Writes a small EDF+ with pyedflib (two signals, 250 Hz, one annotation)
   and derives one broken copy per defect by editing bytes:
   - record_size_mismatch.edf: signal 1's samples-per-record field says 248,
     the data hold 250 per record;
   - unterminated_annotation.edf: the event's TAL loses its 0x14 0x00 end
     and runs to the end of the annotation signal;
   - garbage_annotation.edf: non-zero bytes after the last TAL;
   - unsigned_onset.edf: the event's onset written without its sign;
   - huge_onset.edf: onset +100000000000000000;
   - trailing_bytes.edf: 7 bytes appended after the last record (a warning).
"""
import json
import os
import subprocess
import sys
import tempfile
import zipfile

import numpy as np
import pyedflib

OUT = os.path.join(os.path.dirname(__file__), "fixtures", "edf")


def fetch_subsecond():
    with tempfile.TemporaryDirectory() as d:
        subprocess.check_call([sys.executable, "-m", "pip", "download", "pyedflib==0.1.42",
                               "--no-deps", "--only-binary", ":all:", "-d", d, "-q"])
        whl = [f for f in os.listdir(d) if f.endswith(".whl")][0]
        with zipfile.ZipFile(os.path.join(d, whl)) as z:
            data = z.read("pyedflib/tests/data/test_subsecond.edf")
    path = os.path.join(OUT, "pyedflib_test_subsecond.edf")
    with open(path, "wb") as f:
        f.write(data)
    r = pyedflib.EdfReader(path)
    on, du, tx = r.readAnnotations()
    info = {
        "pyedflib": pyedflib.__version__, "source": "pyedflib 0.1.42 wheel, pyedflib/tests/data/test_subsecond.edf",
        "first_record_onset": 0.3945312,
        "annotations": [{"onset": float(o), "label": str(t)} for o, t in zip(on, tx)],
        "rate": float(r.getSampleFrequencies()[0]), "samples": int(r.getNSamples()[0]),
    }
    r.close()
    with open(os.path.join(OUT, "subsecond.json"), "w") as f:
        json.dump(info, f, indent=1)


def base_file(path):
    fs, n = 250, 250 * 6
    t = np.arange(n) / fs
    w = pyedflib.EdfWriter(path, 2, file_type=pyedflib.FILETYPE_EDFPLUS)
    w.setSignalHeaders([{"label": ch, "dimension": "uV", "sample_frequency": fs, "physical_max": 200,
                         "physical_min": -200, "digital_max": 32767, "digital_min": -32768,
                         "transducer": "", "prefilter": ""} for ch in ("A", "B")])
    w.writeSamples([50 * np.sin(2 * np.pi * 10 * t), 30 * np.cos(2 * np.pi * 7 * t)])
    w.writeAnnotation(2.0, 1.0, "cue")
    w.close()
    with open(path, "rb") as f:
        return bytearray(f.read())


def main():
    os.makedirs(OUT, exist_ok=True)
    fetch_subsecond()
    tmp = os.path.join(OUT, "_base.edf")
    raw = base_file(tmp)
    os.remove(tmp)
    ns = int(raw[252:256])
    spr_at = 256 + 216 * ns
    hb = 256 * (ns + 1)
    spr = [int(raw[spr_at + 8 * k: spr_at + 8 * k + 8]) for k in range(ns)]
    ann_off = hb + 2 * sum(spr[:ns - 1])  # first record's annotation bytes
    ann_len = 2 * spr[ns - 1]

    def save(name, data):
        with open(os.path.join(OUT, name), "wb") as f:
            f.write(bytes(data))

    save("valid.edf", raw)
    b = bytearray(raw)
    b[spr_at + 8: spr_at + 16] = b"248     "
    save("record_size_mismatch.edf", b)
    tal = bytes(raw[ann_off: ann_off + ann_len])
    i = tal.index(b"cue\x14\x00")
    b = bytearray(raw)
    b[ann_off + i + 3: ann_off + ann_len] = b"x" * (ann_len - i - 3)
    save("unterminated_annotation.edf", b)
    b = bytearray(raw)
    b[ann_off + ann_len - 3: ann_off + ann_len] = b"\x07\x07\x07"
    save("garbage_annotation.edf", b)
    b = bytearray(raw)
    new = tal.replace(b"+2\x151\x14cue", b"2\x151\x14cue", 1) + b"\x00"
    b[ann_off: ann_off + ann_len] = new[:ann_len]
    save("unsigned_onset.edf", b)
    b = bytearray(raw)
    huge = tal.replace(b"+2\x151\x14cue\x14\x00", b"+100000000000000000\x14cue\x14\x00", 1)
    b[ann_off: ann_off + ann_len] = huge[:ann_len]
    save("huge_onset.edf", b)
    save("trailing_bytes.edf", raw + b"\x00" * 7)
    print("wrote", sorted(os.listdir(OUT)))


if __name__ == "__main__":
    main()
