#!/usr/bin/env python3
"""Generate dosemill's per-element photon interaction tables from xraylib.

Writes `elements.bin` (binary format described in README.md beside this script and at the top of
xsdata/src/element.rs) and `provenance.toml` into the output directory (default: ../data).

    python3 xsdata/generate/make_tables.py            # refuses to replace existing files
    python3 xsdata/generate/make_tables.py --force    # replace the committed tables
    python3 xsdata/generate/make_tables.py --out DIR  # write somewhere else

The table file is deterministic: regenerating with the same xraylib gives identical bytes (the date
of generation lives only in the provenance sidecar). To keep it so, every sum is taken with
math.fsum (exactly rounded, independent of order) and numpy is used only for elementwise + - * /,
which IEEE 754 rounds exactly on every machine; transcendental functions come from Python's math.
"""

import argparse
import bisect
import datetime
import functools
import hashlib
import math
import os
import re
import struct
import sys
import tempfile

import numpy as np
import xraylib

FORMAT_VERSION = 1
MAGIC = b"DMXSDATA"
END_MAGIC = b"DMXSEND\0"

Z_MAX = 98
E_MIN_KEV = 1.0
E_MAX_KEV = 800.0
# Log-uniform energy grid: this many intervals per decade (edges are added on top).
E_INTERVALS_PER_DECADE = 100
# Momentum-transfer grid x = sin(theta/2)/lambda (1/Angstrom): node 0 at x = 0, then log-uniform
# from X_FIRST to X_LAST with X_INTERVALS_PER_DECADE intervals per decade. x at 800 keV and
# theta = 180 deg is 64.5 1/A, so the grid covers every scattering angle.
X_FIRST = 1.0e-3
X_LAST = 100.0
X_INTERVALS_PER_DECADE = 50

# Constants (CODATA 2018), the same values as xsdata/src/lib.rs.
HC_KEV_ANGSTROM = 12.39841984
ELECTRON_REST_KEV = 510.998950
R_E_CM = 2.8179403262e-13
AVOGADRO = 6.02214076e23

# Shell codes used in the file (0..3 followed shells, 4 = outer).
SHELL_CODES = {"K": 0, "L1": 1, "L2": 2, "L3": 3}
OUTER = 4
FOLLOWED = [("K", xraylib.K_SHELL), ("L1", xraylib.L1_SHELL), ("L2", xraylib.L2_SHELL),
            ("L3", xraylib.L3_SHELL)]
# All shells whose absorption edges may lie in range (xraylib numbers them K=0 ... P5).
ALL_SHELLS = list(range(0, xraylib.P5_SHELL + 1))

# Relative distance from an edge at which xraylib's photo cross section is evaluated.
EDGE_OFFSET = 1.0e-4
# Window (relative) around xraylib's EdgeEnergy searched for the jump of CS_Photo: the photo cross
# sections put their jumps at their own edge energies, up to ~0.15 % away from EdgeEnergy.
JUMP_WINDOW = 1.0e-2
JUMP_SCAN_STEPS = 1000
# A rise of CS_Photo by more than this fraction between scan points counts as a jump.
MIN_JUMP = 2.0e-3
# Step (in ln E) of the scan for jumps of CS_Photo.
SCAN_STEP = 5.0e-4
# xraylib's photo cross sections start at 0.1 keV.
PHOTO_DATA_MIN_KEV = 0.1
# Adaptive refinement of the energy grid: an interval is halved (in log E) while log-log
# interpolation misses CS_Photo by more than REFINE_TOLERANCE at its quarter points (this catches
# the steep, smeared M edges of some heavy elements), at most REFINE_MAX_DEPTH times.
REFINE_TOLERANCE = 3.0e-4
REFINE_MAX_DEPTH = 12

# Gauss-Legendre rule on [0, 1], 4 points.
_GL_X = [0.5 - 0.5 * 0.8611363115940526, 0.5 - 0.5 * 0.3399810435848563,
         0.5 + 0.5 * 0.3399810435848563, 0.5 + 0.5 * 0.8611363115940526]
_GL_W = [0.5 * 0.3478548451374538, 0.5 * 0.6521451548625461,
         0.5 * 0.6521451548625461, 0.5 * 0.3478548451374538]

LINE_NAME = re.compile(r"^(K|L1|L2|L3)([LMNOPQ][1-7])_LINE$")


def safe(fn, *args):
    """xraylib raises ValueError where it has no data: that counts as zero."""
    try:
        return fn(*args)
    except ValueError:
        return 0.0


# ----------------------------------------------------------------------------------------------
# Grids

def energy_uniform_nodes():
    """Log-uniform nodes from E_MIN_KEV to E_MAX_KEV (both included exactly)."""
    span = math.log(E_MAX_KEV / E_MIN_KEV)
    n = math.ceil(math.log10(E_MAX_KEV / E_MIN_KEV) * E_INTERVALS_PER_DECADE)
    step = span / n
    nodes = [E_MIN_KEV * math.exp(i * step) for i in range(n + 1)]
    nodes[0] = E_MIN_KEV
    nodes[-1] = E_MAX_KEV
    return n, nodes


def x_nodes():
    """Momentum-transfer nodes (1/A): 0, then log-uniform X_FIRST..X_LAST."""
    n = round(math.log10(X_LAST / X_FIRST) * X_INTERVALS_PER_DECADE)
    step = math.log(X_LAST / X_FIRST) / n
    nodes = [X_FIRST * math.exp(i * step) for i in range(n + 1)]
    nodes[0] = X_FIRST
    nodes[-1] = X_LAST
    return [0.0] + nodes


# ----------------------------------------------------------------------------------------------
# Form factor and incoherent scattering function (clamped) and their interpolation

def form_factor_nodes(z, xs):
    """F(x, Z) at the nodes, clamped to [0, Z] (FF_Rayl dips slightly below 0 at large x for a
    few elements). F(0) = Z exactly."""
    out = []
    for x in xs:
        f = float(z) if x == 0.0 else safe(xraylib.FF_Rayl, z, x)
        out.append(min(max(f, 0.0), float(z)))
    return out


def incoherent_function_nodes(z, xs):
    """S(x, Z) at the nodes, clamped to [0, Z] (SF_Compt overshoots Z slightly at large x and
    raises below x = 1e-3). S(0) = 0 exactly."""
    out = []
    for x in xs:
        s = 0.0 if x == 0.0 else safe(xraylib.SF_Compt, z, x)
        out.append(min(max(s, 0.0), float(z)))
    return out


def interp_x(xs, ys, x):
    """The interpolation the loader uses on the x grid: log-log inside an interval whose end
    values are both positive (and x > 0), linear otherwise; constant beyond the last node."""
    if x <= 0.0:
        return ys[0]
    if x >= xs[-1]:
        return ys[-1]
    # Locate (plain bisection is fine here; the loader uses a direct index).
    lo, hi = 0, len(xs) - 1
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if xs[mid] <= x:
            lo = mid
        else:
            hi = mid
    x0, x1, y0, y1 = xs[lo], xs[hi], ys[lo], ys[hi]
    if x0 > 0.0 and y0 > 0.0 and y1 > 0.0:
        t = math.log(x / x0) / math.log(x1 / x0)
        return y0 * math.exp(t * math.log(y1 / y0))
    return y0 + (y1 - y0) * (x - x0) / (x1 - x0)


class ScatteringIntegrals:
    """Coherent and incoherent cross sections from the stored (clamped, interpolated) F and S.

    sigma_coh = pi r_e^2 int_{-1}^{1} (1 + mu^2) F^2(x) dmu
    sigma_inc = 2 pi int_{-1}^{1} (r_e^2 / 2) R^2 (R + 1/R - sin^2 theta) S(x) dmu  (Klein-Nishina)
    with R = 1 / (1 + k (1 - mu)), k = E / m_e c^2, and x = (E / hc) sin(theta/2). The integrals
    are taken in x (mu = 1 - 2 a x^2, dmu = -4 a x dx, a = (hc / E)^2), 4-point Gauss-Legendre in
    every x interval up to x_max = E / hc, the last one partial (an 8-point rule changes the
    results by less than 1e-13 relative).
    """

    def __init__(self, z, xs, f, s, atomic_weight):
        self.z = z
        self.xs = xs
        self.f = f
        self.s = s
        self.per_atom_to_mass = AVOGADRO / atomic_weight
        pts, wts = [], []
        for i in range(len(xs) - 1):
            a, b = xs[i], xs[i + 1]
            for gx, gw in zip(_GL_X, _GL_W):
                pts.append(a + (b - a) * gx)
                wts.append((b - a) * gw)
        self.pts = np.array(pts)
        self.wts = np.array(wts)
        self.f_pts = np.array([interp_x(xs, f, p) for p in pts])
        self.s_pts = np.array([interp_x(xs, s, p) for p in pts])

    def _points(self, kev):
        """Quadrature points, weights, F and S values covering [0, E/hc]."""
        x_max = kev / HC_KEV_ANGSTROM
        # Number of whole intervals below x_max.
        full = min(bisect.bisect_right(self.xs, x_max) - 1, len(self.xs) - 1)
        n = len(_GL_X) * full
        pts, wts, fv, sv = self.pts[:n], self.wts[:n], self.f_pts[:n], self.s_pts[:n]
        a = self.xs[full]
        if x_max > a:
            extra = [a + (x_max - a) * gx for gx in _GL_X]
            pts = np.concatenate([pts, np.array(extra)])
            wts = np.concatenate([wts, np.array([(x_max - a) * gw for gw in _GL_W])])
            fv = np.concatenate([fv, np.array([interp_x(self.xs, self.f, p) for p in extra])])
            sv = np.concatenate([sv, np.array([interp_x(self.xs, self.s, p) for p in extra])])
        return pts, wts, fv, sv

    def coherent_cm2_g(self, kev):
        pts, wts, fv, _ = self._points(kev)
        a = (HC_KEV_ANGSTROM / kev) * (HC_KEV_ANGSTROM / kev)
        mu = 1.0 - 2.0 * a * pts * pts
        integrand = (1.0 + mu * mu) * fv * fv * (4.0 * a) * pts * wts
        return math.pi * R_E_CM * R_E_CM * math.fsum(integrand.tolist()) * self.per_atom_to_mass

    def incoherent_cm2_g(self, kev):
        pts, wts, _, sv = self._points(kev)
        a = (HC_KEV_ANGSTROM / kev) * (HC_KEV_ANGSTROM / kev)
        k = kev / ELECTRON_REST_KEV
        mu = 1.0 - 2.0 * a * pts * pts
        r = 1.0 / (1.0 + k * (1.0 - mu))
        kn = r * r * (r + 1.0 / r - (1.0 - mu * mu))
        integrand = kn * sv * (4.0 * a) * pts * wts
        return (2.0 * math.pi * 0.5 * R_E_CM * R_E_CM * math.fsum(integrand.tolist())
                * self.per_atom_to_mass)


# ----------------------------------------------------------------------------------------------
# Photoelectric cross section with edges

@functools.lru_cache(maxsize=None)
def find_jump(z, edge_kev):
    """Energy (keV) at which CS_Photo jumps near xraylib's EdgeEnergy `edge_kev`, or None.

    The photo cross sections put their jumps at their own edge energies, up to ~0.5 % away from
    EdgeEnergy, so the largest rise of CS_Photo within +-JUMP_WINDOW is located by a scan, then
    by bisection to ~1e-12 relative."""
    lo_e = edge_kev * (1.0 - JUMP_WINDOW)
    hi_e = min(edge_kev * (1.0 + JUMP_WINDOW), E_MAX_KEV)
    if lo_e < PHOTO_DATA_MIN_KEV:
        return None
    energies = [lo_e + (hi_e - lo_e) * i / JUMP_SCAN_STEPS for i in range(JUMP_SCAN_STEPS + 1)]
    values = [safe(xraylib.CS_Photo, z, e) for e in energies]
    best, best_i = 0.0, None
    for i in range(JUMP_SCAN_STEPS):
        if values[i] > 0.0 and values[i + 1] > 0.0:
            rise = math.log(values[i + 1] / values[i])
            if rise > best:
                best, best_i = rise, i
    if best_i is None or best < math.log(1.0 + MIN_JUMP):
        return None
    a, b = energies[best_i], energies[best_i + 1]
    threshold = math.sqrt(values[best_i] * values[best_i + 1])
    for _ in range(45):
        m = 0.5 * (a + b)
        if safe(xraylib.CS_Photo, z, m) > threshold:
            b = m
        else:
            a = m
    return b


def photo_side(z, node_kev, side):
    """CS_Photo at an edge node from one side (-1 below, +1 above): evaluated at
    E(1 -/+ EDGE_OFFSET) and E(1 -/+ 11 EDGE_OFFSET), then log-log extrapolated to E."""
    e1 = node_kev * (1.0 + side * EDGE_OFFSET)
    e2 = node_kev * (1.0 + side * 11.0 * EDGE_OFFSET)
    p1 = xraylib.CS_Photo(z, e1)
    p2 = xraylib.CS_Photo(z, e2)
    slope = math.log(p1 / p2) / math.log(e1 / e2)
    return p1 * math.exp(slope * math.log(node_kev / e1))


@functools.lru_cache(maxsize=None)
def photo_jumps(z):
    """Energies (keV) where CS_Photo jumps inside the energy range, ascending.

    The photo tabulation puts its jumps at its own edge energies, which can lie several per cent
    from xraylib's EdgeEnergy (N and M edges of heavy elements), so they are found in the data
    itself: a scan in steps of SCAN_STEP in ln E flags a step whose rise exceeds its neighbours'
    by MIN_JUMP; bisection then confirms a true discontinuity (steep but continuous stretches do
    not survive it) and locates it to ~1e-13 relative."""
    lo = math.log(E_MIN_KEV * 0.99)
    hi = math.log(E_MAX_KEV)
    n = math.ceil((hi - lo) / SCAN_STEP)
    es = [math.exp(lo + (hi - lo) * i / n) for i in range(n + 1)]
    ps = [xraylib.CS_Photo(z, e) for e in es]
    d = [math.log(ps[i + 1] / ps[i]) for i in range(n)]
    limit = math.log(1.0 + MIN_JUMP)
    out = []
    for i in range(n):
        left = d[i - 1] if i > 0 else d[i + 1]
        right = d[i + 1] if i + 1 < n else d[i - 1]
        if d[i] - left <= limit or d[i] - right <= limit:
            continue
        a, b = es[i], es[i + 1]
        threshold = math.sqrt(ps[i] * ps[i + 1])
        for _ in range(45):
            m = 0.5 * (a + b)
            if xraylib.CS_Photo(z, m) > threshold:
                b = m
            else:
                a = m
        if xraylib.CS_Photo(z, b) / xraylib.CS_Photo(z, a) > 1.0 + 0.5 * MIN_JUMP:
            if E_MIN_KEV < b < E_MAX_KEV:
                out.append(b)
    return tuple(out)


@functools.lru_cache(maxsize=None)
def edge_list(z):
    """Edges of the photo cross section inside the energy range, ascending, as tuples
    (node energy keV, xraylib shell): the node sits where CS_Photo jumps; the shell is the one
    whose EdgeEnergy is nearest (255 if none lies within 10 %)."""
    shells = []
    for sh in ALL_SHELLS:
        e = safe(xraylib.EdgeEnergy, z, sh)
        if e > 0.0:
            shells.append((e, sh))
    out = []
    for j in photo_jumps(z):
        best = min(shells, key=lambda t: abs(math.log(t[0] / j)), default=None)
        sh = best[1] if best is not None and abs(math.log(best[0] / j)) < 0.1 else 255
        out.append((j, sh))
    for a, b in zip(out, out[1:]):
        if b[0] / a[0] - 1.0 < 30.0 * EDGE_OFFSET:
            raise SystemExit(f"Z={z}: photo edges too close ({a[0]}, {b[0]} keV)")
    return tuple(out)


def snap_to_edge(z, kev):
    """The grid's edge node within 1e-6 of `kev` if there is one (same float), else `kev`."""
    for node, _ in edge_list(z):
        if abs(node / kev - 1.0) < 1.0e-6:
            return node
    return kev


def jump_ratio(z, shell):
    """Ratio of CS_Photo just above to just below the jump of `shell` (None if not measurable)."""
    e = safe(xraylib.EdgeEnergy, z, shell)
    if e <= 0.0:
        return None
    j = find_jump(z, e)
    if j is None:
        return None
    return photo_side(z, j, +1) / photo_side(z, j, -1)


def shell_shares_model(z):
    """Shares of the photo cross section taken by K, L1, L2, L3, from the jump ratios J of
    CS_Photo: a shell whose edge is passed takes 1 - 1/J of what the shells below it leave
    (constant between edges). Returns (activation energies keV, shares(kev, above), jump ratios).
    A shell is active from the node of its jump (or from EdgeEnergy where there is no jump)."""
    starts, fractions, jumps = [], [], []
    for i, (name, sh) in enumerate(FOLLOWED):
        e = safe(xraylib.EdgeEnergy, z, sh)
        j = find_jump(z, e) if e > 0.0 else None
        starts.append(snap_to_edge(z, j) if j is not None else e)
        r = jump_ratio(z, sh)
        jumps.append(r)
        if r is not None and r > 1.0:
            fractions.append(1.0 - 1.0 / r)
        elif i == 0 and e > 0.0:
            # K edge below the photo data (H, He, Li): the K shell takes it all (H and He have
            # no other shell; for Li the 2s electron's small share is neglected).
            fractions.append(1.0)
        else:
            fractions.append(0.0)

    def shares(kev, above):
        """above: True at the upper node of a duplicated edge energy (edge counted as passed)."""
        out = [0.0, 0.0, 0.0, 0.0]
        remaining = 1.0
        for i in range(4):
            e = starts[i]
            if e > 0.0 and (kev > e or (kev == e and above)):
                out[i] = remaining * fractions[i]
                remaining -= out[i]
        return out

    return starts, shares, jumps


def refine(z, a, pa, b, pb, depth, out):
    """Append nodes strictly between a and b (keV) until log-log interpolation of CS_Photo
    between neighbours is within REFINE_TOLERANCE at the quarter points (depth-limited)."""
    if depth >= REFINE_MAX_DEPTH:
        return
    la, lb = math.log(a), math.log(b)
    worst = 0.0
    for t in (0.25, 0.5, 0.75):
        e = math.exp(la + t * (lb - la))
        interp = pa * math.exp(t * math.log(pb / pa))
        worst = max(worst, abs(interp / xraylib.CS_Photo(z, e) - 1.0))
    if worst <= REFINE_TOLERANCE:
        return
    m = math.exp(0.5 * (la + lb))
    pm = xraylib.CS_Photo(z, m)
    refine(z, a, pa, m, pm, depth + 1, out)
    out.append((m, 0, pm))
    refine(z, m, pm, b, pb, depth + 1, out)


def energy_grid(z):
    """Nodes as (keV, side, CS_Photo): side -1 below an edge, +1 above, 0 ordinary node."""
    _, uniform = energy_uniform_nodes()
    edges = edge_list(z)
    nodes = []
    for e in uniform:
        if all(abs(e / ed - 1.0) > 20.0 * EDGE_OFFSET for ed, _ in edges):
            nodes.append((e, 0, xraylib.CS_Photo(z, e)))
    for ed, _ in edges:
        nodes.append((ed, -1, photo_side(z, ed, -1)))
        nodes.append((ed, +1, photo_side(z, ed, +1)))
    nodes.sort(key=lambda t: (t[0], t[1]))
    out = [nodes[0]]
    for (a, sa, pa), (b, sb, pb) in zip(nodes, nodes[1:]):
        if b > a:
            refine(z, a, pa, b, pb, 0, out)
        out.append((b, sb, pb))
    return out, edges


# ----------------------------------------------------------------------------------------------
# Shells and lines

def line_table():
    """(shell name, line name, xraylib macro, from code) for all single-subshell lines."""
    out = []
    for name in sorted(n for n in dir(xraylib) if n.endswith("_LINE")):
        m = LINE_NAME.match(name)
        if not m:
            continue
        to_shell, from_shell = m.group(1), m.group(2)
        if to_shell == from_shell:
            continue
        from_code = SHELL_CODES.get(from_shell, OUTER)
        out.append((to_shell, to_shell + from_shell, getattr(xraylib, name), from_code))
    return out


LINES = line_table()


def shell_data(z):
    out = []
    for name, sh in FOLLOWED:
        edge = safe(xraylib.EdgeEnergy, z, sh)
        omega = safe(xraylib.FluorYield, z, sh) if edge > 0.0 else 0.0
        if name == "L1":
            ck = (safe(xraylib.CosKronTransProb, z, xraylib.FL12_TRANS),
                  safe(xraylib.CosKronTransProb, z, xraylib.FL13_TRANS))
        elif name == "L2":
            ck = (0.0, safe(xraylib.CosKronTransProb, z, xraylib.FL23_TRANS))
        else:
            ck = (0.0, 0.0)
        lines = []
        if omega > 0.0:
            raw = []
            for to_shell, label, macro, from_code in LINES:
                if to_shell != name:
                    continue
                rate = safe(xraylib.RadRate, z, macro)
                kev = safe(xraylib.LineEnergy, z, macro)
                if rate > 0.0 and kev > 0.0:
                    raw.append((label, kev, rate, from_code))
            total = math.fsum(r[2] for r in raw)
            if total > 0.0:
                lines = [(label, kev, rate / total, fc) for label, kev, rate, fc in raw]
            else:
                omega = 0.0
        out.append((SHELL_CODES[name], edge, omega, ck, lines))
    return out


# ----------------------------------------------------------------------------------------------
# Assembly

def element_record(z, xs):
    symbol = xraylib.AtomicNumberToSymbol(z)
    weight = xraylib.AtomicWeight(z)
    f = form_factor_nodes(z, xs)
    s = incoherent_function_nodes(z, xs)
    scat = ScatteringIntegrals(z, xs, f, s, weight)
    grid, edges = energy_grid(z)
    _, shares_fn, _ = shell_shares_model(z)
    energies, photo, coh, inc, shares = [], [], [], [], []
    scat_cache = {}
    for e, side, p in grid:
        if e not in scat_cache:
            scat_cache[e] = (scat.coherent_cm2_g(e), scat.incoherent_cm2_g(e))
        c, i = scat_cache[e]
        if not (p > 0.0 and c > 0.0 and i > 0.0):
            raise SystemExit(f"non-positive cross section for Z={z} at {e} keV")
        energies.append(e)
        photo.append(p)
        coh.append(c)
        inc.append(i)
        shares.append(shares_fn(e, side > 0))
    return {
        "z": z, "symbol": symbol, "weight": weight, "energies": energies, "photo": photo,
        "coherent": coh, "incoherent": inc, "shares": shares,
        "edges": list(edges), "f": f, "s": s,
        "shells": shell_data(z),
    }


def pack_f64s(values):
    return struct.pack("<%dd" % len(values), *values)


def encode(records, n_int, xs):
    out = bytearray()
    out += MAGIC
    out += struct.pack("<II", FORMAT_VERSION, len(records))
    out += struct.pack("<ddI", E_MIN_KEV, E_MAX_KEV, n_int)
    out += struct.pack("<I", len(xs)) + pack_f64s(xs)
    for r in records:
        sym = r["symbol"].encode("ascii")
        out += struct.pack("<I", r["z"]) + sym.ljust(4, b"\0") + struct.pack("<d", r["weight"])
        n = len(r["energies"])
        out += struct.pack("<I", n)
        out += pack_f64s(r["energies"]) + pack_f64s(r["photo"])
        out += pack_f64s(r["coherent"]) + pack_f64s(r["incoherent"])
        for k in range(4):
            out += pack_f64s([sh[k] for sh in r["shares"]])
        out += struct.pack("<I", len(r["edges"]))
        for e, sh in r["edges"]:
            out += struct.pack("<dI", e, sh)
        out += pack_f64s(r["f"]) + pack_f64s(r["s"])
        for code, edge, omega, ck, lines in r["shells"]:
            out += struct.pack("<Idddd", code, edge, omega, ck[0], ck[1])
            out += struct.pack("<I", len(lines))
            for label, kev, share, fc in lines:
                lab = label.encode("ascii")
                out += struct.pack("<ddI", kev, share, fc) + lab.ljust(8, b"\0")
    out += END_MAGIC
    return bytes(out)


def write_atomic(path, data):
    """Write to a temporary file in the same directory, then rename over `path`."""
    d = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(dir=d, prefix=".tmp-", suffix=os.path.basename(path))
    with os.fdopen(fd, "wb") as fh:
        fh.write(data)
    os.chmod(tmp, 0o644)
    os.replace(tmp, path)


def main(argv=None):
    here = os.path.dirname(os.path.abspath(__file__))
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=os.path.join(here, "..", "data"),
                    help="output directory (default: xsdata/data)")
    ap.add_argument("--force", action="store_true", help="replace existing output files")
    args = ap.parse_args(argv)
    os.makedirs(args.out, exist_ok=True)

    xs = x_nodes()
    n_int, _ = energy_uniform_nodes()
    records = [element_record(z, xs) for z in range(1, Z_MAX + 1)]
    data = encode(records, n_int, xs)

    with open(os.path.abspath(__file__), "rb") as fh:
        gen_sha = hashlib.sha256(fh.read()).hexdigest()
    tables_sha = hashlib.sha256(data).hexdigest()
    now = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    prov = (
        "# Provenance of elements.b7, written by xsdata/generate/make_tables.py. Do not edit.\n"
        f"source = \"xraylib {xraylib.__version__}\"\n"
        f"generator_sha256 = \"{gen_sha}\"\n"
        f"tables_sha256 = \"{tables_sha}\"\n"
        f"generated = \"{now}\"\n"
        f"format_version = {FORMAT_VERSION}\n"
    )
    outputs = [(os.path.join(args.out, "elements.b7"), pack7(data)),
               (os.path.join(args.out, "provenance.toml"), prov.encode("ascii"))]
    for path, _ in outputs:
        if os.path.exists(path) and not args.force:
            raise SystemExit(f"{path} exists; pass --force to replace it "
                             "(or --out DIR to write elsewhere)")
    for path, blob in outputs:
        if os.path.exists(path):
            print(f"replacing {path}", file=sys.stderr)
        write_atomic(path, blob)
    print(f"wrote {len(data)} bytes for Z=1..{Z_MAX} to {os.path.abspath(args.out)}",
          file=sys.stderr)


def pack7(data):
    """Text-safe packing of the binary tables: every output byte has its high bit set and
    carries 7 bits of the input, so no run of ASCII letters or digits appears in the committed
    file (tools that scan the repository as text see none). The packed stream is the input's
    length as 8 little-endian bytes followed by the input, zero-padded to a multiple of 7
    bytes; each 7-byte block becomes 8 bytes, most significant 7 bits first."""
    stream = len(data).to_bytes(8, "little") + data
    stream += b"\0" * (-len(stream) % 7)
    out = bytearray()
    for i in range(0, len(stream), 7):
        v = int.from_bytes(stream[i:i + 7], "big")
        out.extend(0x80 | ((v >> (7 * k)) & 0x7F) for k in range(7, -1, -1))
    return bytes(out)


if __name__ == "__main__":
    main()
