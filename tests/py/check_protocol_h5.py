"""Reads a protocol report's HDF5 file with h5py (the HDF5 reference library's Python interface)
and prints a JSON summary for the Rust test to compare with the CSV report."""
import json
import sys

import h5py

out = {"attrs": {}, "exams": {}}
with h5py.File(sys.argv[1], "r") as f:
    for k, v in f.attrs.items():
        out["attrs"][k] = v.decode() if isinstance(v, bytes) else (v.item() if hasattr(v, "item") else v)
    for name, g in f.items():
        exam = {"name": g.attrs["name"].decode() if isinstance(g.attrs["name"], bytes) else str(g.attrs["name"]), "datasets": {}}
        for dname, d in g.items():
            exam["datasets"][dname] = {"values": [float(x) for x in d[()].ravel()], "units": (d.attrs["units"].decode() if isinstance(d.attrs["units"], bytes) else str(d.attrs["units"]))}
        out["exams"][name] = exam
print(json.dumps(out, default=str))
