#!/usr/bin/env python3
"""Check a dosemill result file with h5py (an independent HDF5 reader) against a JSON spec.

Usage: check_result.py RESULT.h5 SPEC.json

The spec lists every attribute and dataset the file must hold, and nothing else may be there:
  {"attrs": {NAME: ATTR, ...},
   "groups": {PATH: {"attrs": {...}}, ...},
   "datasets": {PATH: {"shape": [...], "dtype": "float64"|...|"str", "units": "Gy",
                       "values": [...], "attrs": {...}}}}
ATTR is {"type": "str"|"f64"|"i64"|"u64"|"f64s"|"i64s"|"bool", "value": ...}.
Float values are given as their IEEE-754 bit patterns (integers) so the check is bit for bit.
Exit status 0 when everything matches; otherwise every mismatch is printed and the status is 1.
"""
import json
import sys

import h5py
import numpy as np

errors = []


def fail(msg):
    errors.append(msg)


def float_bits(values, dtype):
    arr = np.asarray(values, dtype=dtype).ravel()
    return arr.view(np.uint64 if dtype == np.float64 else np.uint32).tolist()


def check_attr(where, name, got, want):
    kind, value = want["type"], want["value"]
    label = f"{where} attribute {name!r}"
    if kind == "str":
        # Variable-length UTF-8 strings come back from h5py as Python str.
        if not isinstance(got, str):
            fail(f"{label}: expected str, h5py gave {type(got).__name__}")
        elif got != value:
            fail(f"{label}: string differs (len {len(got)} vs {len(value)})")
        return
    arr = np.asarray(got)
    if kind == "f64":
        if arr.dtype != np.float64 or arr.shape != ():
            fail(f"{label}: expected scalar float64, got {arr.dtype} {arr.shape}")
        elif float_bits(arr, np.float64) != [value]:
            fail(f"{label}: bits {float_bits(arr, np.float64)} != {[value]}")
    elif kind in ("i64", "u64"):
        want_dt = np.int64 if kind == "i64" else np.uint64
        if arr.dtype != want_dt or arr.shape != ():
            fail(f"{label}: expected scalar {np.dtype(want_dt)}, got {arr.dtype} {arr.shape}")
        elif int(arr) != value:
            fail(f"{label}: {int(arr)} != {value}")
    elif kind == "bool":
        # Stored as uint8 0/1 (documented in output/mod.rs).
        if arr.dtype != np.uint8 or arr.shape != ():
            fail(f"{label}: expected scalar uint8 flag, got {arr.dtype} {arr.shape}")
        elif int(arr) != (1 if value else 0):
            fail(f"{label}: {int(arr)} != {value}")
    elif kind == "f64s":
        if arr.dtype != np.float64 or arr.ndim != 1:
            fail(f"{label}: expected 1-D float64, got {arr.dtype} {arr.shape}")
        elif float_bits(arr, np.float64) != value:
            fail(f"{label}: values differ")
    elif kind == "i64s":
        if arr.dtype != np.int64 or arr.ndim != 1:
            fail(f"{label}: expected 1-D int64, got {arr.dtype} {arr.shape}")
        elif arr.tolist() != value:
            fail(f"{label}: {arr.tolist()} != {value}")
    else:
        fail(f"{label}: spec has unknown type {kind!r}")


def check_attrs(where, obj, want, skip=()):
    names = set(obj.attrs.keys()) - set(skip)
    for extra in sorted(names - set(want)):
        fail(f"{where}: unexpected attribute {extra!r}")
    for name, w in want.items():
        if name not in obj.attrs:
            fail(f"{where}: attribute {name!r} missing")
            continue
        check_attr(where, name, obj.attrs[name], w)


def check_dataset(path, ds, want):
    if list(ds.shape) != want["shape"]:
        fail(f"{path}: shape {list(ds.shape)} != {want['shape']}")
        return
    dt = want["dtype"]
    if dt == "str":
        info = h5py.check_string_dtype(ds.dtype)
        if info is None or info.encoding != "utf-8":
            fail(f"{path}: expected a UTF-8 string dataset, got {ds.dtype} ({info})")
            return
        got = np.asarray(ds.asstr()[()], dtype=object).ravel().tolist()
        if got != want["values"]:
            fail(f"{path}: strings differ")
    else:
        if ds.dtype != np.dtype(dt):
            fail(f"{path}: dtype {ds.dtype} != {dt}")
            return
        if ds.dtype.byteorder not in ("<", "=", "|"):
            fail(f"{path}: byte order {ds.dtype.byteorder!r}, expected little-endian")
        arr = np.asarray(ds[()])
        if dt in ("float64", "float32"):
            got = float_bits(arr, np.dtype(dt).type)
        else:
            got = arr.ravel().tolist()
        if got != want["values"]:
            fail(f"{path}: values differ: {got[:8]} vs {want['values'][:8]}")
    units = ds.attrs.get("units")
    if not isinstance(units, str) or units != want["units"]:
        fail(f"{path}: units attribute {units!r} != {want['units']!r}")
    check_attrs(path, ds, want["attrs"], skip=("units",))


def main():
    if len(sys.argv) != 3:
        print(__doc__, file=sys.stderr)
        return 2
    with open(sys.argv[2], encoding="utf-8") as fh:
        spec = json.load(fh)
    seen_groups, seen_datasets = [], []
    with h5py.File(sys.argv[1], "r") as f:
        check_attrs("/", f, spec["attrs"])

        def visit(name, obj):
            path = "/" + name
            if isinstance(obj, h5py.Group):
                seen_groups.append(path)
            elif isinstance(obj, h5py.Dataset):
                seen_datasets.append(path)
            else:
                fail(f"{path}: unexpected object {type(obj).__name__}")

        f.visititems(visit)
        for p in sorted(set(seen_groups) ^ set(spec["groups"])):
            fail(f"{p}: group {'unexpected' if p in seen_groups else 'missing'}")
        for p in sorted(set(seen_datasets) ^ set(spec["datasets"])):
            fail(f"{p}: dataset {'unexpected' if p in seen_datasets else 'missing'}")
        for p, want in spec["groups"].items():
            if p in f:
                check_attrs(p, f[p], want["attrs"])
        for p, want in spec["datasets"].items():
            if p in f:
                check_dataset(p, f[p], want)
    for e in errors:
        print("MISMATCH", e)
    print(f"checked {len(spec['datasets'])} datasets, {len(spec['groups'])} groups with h5py "
          f"{h5py.version.version} (HDF5 {h5py.version.hdf5_version}): {len(errors)} mismatches")
    return 1 if errors else 0


if __name__ == "__main__":
    sys.exit(main())
