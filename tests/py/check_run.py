"""Reads a dosemill result file with h5py (an independent HDF5 reader) and checks its layout:
root provenance attributes, the deck text against the deck file, and for every dataset a
`units` attribute and a shape consistent with its uncertainty twin and its axes.
Usage: check_run.py RESULT.h5 DECK.toml [EXPECTED_GROUP ...]; prints one line per problem and
exits 1 if there is any."""
import sys

import h5py

problems = []


def problem(msg):
    problems.append(msg)


def main():
    path, deck = sys.argv[1], sys.argv[2]
    expected = sys.argv[3:]
    with h5py.File(path, "r") as f:
        for key in ("dosemill_version", "git_commit", "data_source", "data_tables_sha256", "seed",
                    "histories", "threads", "wall_time_s", "start_time", "completion",
                    "deck_text", "resolved_deck"):
            if key not in f.attrs:
                problem(f"root attribute {key} missing")
        if f.attrs.get("data_source", "").split(" ")[0] != "xraylib":
            problem(f"data_source is {f.attrs.get('data_source')!r}")
        if len(f.attrs.get("data_tables_sha256", "")) != 64:
            problem("data_tables_sha256 is not a SHA-256 hex digest")
        with open(deck, encoding="utf-8") as fh:
            if f.attrs.get("deck_text") != fh.read():
                problem("deck_text differs from the deck file")
        if f.attrs.get("completion") != "complete":
            problem(f"completion = {f.attrs.get('completion')!r}")
        for name in expected:
            if name not in f:
                problem(f"group {name} missing")

        def visit(name, obj):
            if not isinstance(obj, h5py.Dataset):
                return
            if "units" not in obj.attrs:
                problem(f"{name}: no units attribute")
            if name.endswith("_sigma"):
                twin = name[: -len("_sigma")]
                if twin in f and f[twin].shape != obj.shape:
                    problem(f"{name}: shape {obj.shape} differs from {twin} {f[twin].shape}")
            for a in range(len(obj.shape)):
                edges = obj.attrs.get(f"axis{a}")
                if edges is not None:
                    e = obj.parent[edges]
                    if e.shape != (obj.shape[a] + 1,):
                        problem(f"{name}: axis {a} has {obj.shape[a]} bins but {edges} has shape {e.shape}")

        f.visititems(visit)
    for p in problems:
        print(p)
    sys.exit(1 if problems else 0)


if __name__ == "__main__":
    main()
