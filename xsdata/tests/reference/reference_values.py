#!/usr/bin/env python3
"""Reference values for the xsdata tests, from general-purpose libraries (xraylib, xraydb).

Usage: reference_values.py MODE < requests > answers, one request per line.
  photo-total  "Z E_keV" -> "CS_Photo CS_Total CS_Rayl CS_Compt coherent incoherent" (cm^2/g);
               the last two are the generator's own integrals over its stored F and S
               (xsdata/generate/make_tables.py), evaluated at E.
  edges        "Z"       -> every xraylib EdgeEnergy (keV) of the element, all shells.
  shells       "Z"       -> "EdgeEnergy FluorYield" for K, L1, L2, L3, then JumpFactor(K),
                            then the K-shell CS_Photo_Partial share just above the K edge (or nan).
  lines        "Z LABEL" -> xraylib LineEnergy (keV) of the IUPAC line, e.g. "74 KL3".
  chantler     "Z E_keV" -> "chantler CS_Total": xraydb.mu_chantler total mu/rho (cm^2/g), "nan"
               outside its tables, and xraylib's CS_Total at the same point.
"""
import math
import os
import sys

import xraylib

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "..", "generate"))


def safe(fn, *args):
    try:
        return fn(*args)
    except ValueError:
        return 0.0


def main():
    mode = sys.argv[1]
    out = []
    if mode == "photo-total":
        import make_tables as mt
        xs = mt.x_nodes()
        cache = {}
        for line in sys.stdin:
            if not line.strip():
                continue
            z, e = line.split()
            z, e = int(z), float(e)
            if z not in cache:
                f = mt.form_factor_nodes(z, xs)
                s = mt.incoherent_function_nodes(z, xs)
                cache[z] = mt.ScatteringIntegrals(z, xs, f, s, xraylib.AtomicWeight(z))
            sc = cache[z]
            vals = [xraylib.CS_Photo(z, e), xraylib.CS_Total(z, e), xraylib.CS_Rayl(z, e),
                    xraylib.CS_Compt(z, e), sc.coherent_cm2_g(e), sc.incoherent_cm2_g(e)]
            out.append(" ".join(repr(v) for v in vals))
    elif mode == "edges":
        for line in sys.stdin:
            if not line.strip():
                continue
            z = int(line)
            es = [safe(xraylib.EdgeEnergy, z, sh) for sh in range(0, xraylib.P5_SHELL + 1)]
            out.append(" ".join(repr(e) for e in es if e > 0.0))
    elif mode == "shells":
        for line in sys.stdin:
            if not line.strip():
                continue
            z = int(line)
            vals = []
            for sh in (xraylib.K_SHELL, xraylib.L1_SHELL, xraylib.L2_SHELL, xraylib.L3_SHELL):
                vals += [safe(xraylib.EdgeEnergy, z, sh), safe(xraylib.FluorYield, z, sh)]
            vals.append(safe(xraylib.JumpFactor, z, xraylib.K_SHELL))
            ek = vals[0]
            share = float("nan")
            if ek > 1.0:
                e = ek * 1.002
                try:
                    share = xraylib.CS_Photo_Partial(z, xraylib.K_SHELL, e) / xraylib.CS_Photo(z, e)
                except ValueError:
                    pass
            vals.append(share)
            out.append(" ".join(repr(v) for v in vals))
    elif mode == "lines":
        for line in sys.stdin:
            if not line.strip():
                continue
            z, label = line.split()
            out.append(repr(safe(xraylib.LineEnergy, int(z), getattr(xraylib, label + "_LINE"))))
    elif mode == "chantler":
        import numpy as np
        import xraydb
        requests = [(int(z), float(e)) for z, e in (l.split() for l in sys.stdin if l.strip())]
        by_z = {}
        for i, (z, e) in enumerate(requests):
            by_z.setdefault(z, []).append(i)
        values = [math.nan] * len(requests)
        for z, idx in by_z.items():
            try:
                mu = xraydb.mu_chantler(z, np.array([requests[i][1] * 1000.0 for i in idx]))
            except (IndexError, ValueError, KeyError):
                continue
            for i, v in zip(idx, np.atleast_1d(mu)):
                values[i] = float(v)
        out = [f"{v!r} {safe(xraylib.CS_Total, z, e)!r}" for v, (z, e) in zip(values, requests)]
    else:
        raise SystemExit(f"unknown mode {mode!r}")
    sys.stdout.write("\n".join(out) + "\n")


if __name__ == "__main__":
    main()
