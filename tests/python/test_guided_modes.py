"""Cross-check of ToneService.GuidedModes against an independent SciPy solver of the
vortex-sheet dispersion relation (Tam & Hu 1989, J. Fluid Mech. 201; ../shared/physics.md
section 5).

The server parametrizes each dispersion curve by the radial wavenumber inside the jet and
divides the relation by K_m. This file does not: it works in (kappa, omega) with the product
form as published (K_m kept), uses scipy.special jv, jvp, kv, kvp and scipy.optimize.brentq
for roots on the curve, and finds the saddle point d omega / dk = 0 as the solution of
G = 0, dG/dkappa = 0 (analytic derivatives, Newton on the 2 x 2 system from a bracketing
scan). Dimensionless units: lengths in the jet radius (half-height for planar jets), speeds in
the jet sound speed; kappa = -k > 0, Strouhal number St = omega / (pi Mj).
"""
import math

import numpy as np
import pytest
from scipy.optimize import brentq
from scipy.special import jn_zeros, jnp_zeros, jv, jvp, kv, kvp

REL = 1e-8


@pytest.fixture(scope="module")
def stubs(pb, channel):
    import importlib

    tones = importlib.import_module("jetloop.v1.tones_pb2")
    tones_grpc = importlib.import_module("jetloop.v1.tones_pb2_grpc")
    return tones, tones_grpc.ToneServiceStub(channel)


class Sheet:
    """Jet and ambient of the same gas, static temperature ratio t = Tj/Ta."""

    def __init__(self, mach, t):
        self.M = mach
        self.c = math.sqrt(1.0 / t)  # a_ambient / aj
        self.s = 1.0 / t  # rho_j / rho_ambient

    def lam(self, kap, w):
        return np.sqrt((w + kap * self.M) ** 2 - kap**2)

    def ga(self, kap, w):
        return np.sqrt(kap**2 - (w / self.c) ** 2)

    def kappa_of_lam(self, lam, w):
        M = self.M
        return (-w * M + math.sqrt(w * w * M * M - (M * M - 1) * (w * w - lam * lam))) / (M * M - 1)


class Round:
    def __init__(self, m, r):
        self.m, self.r = m, r
        # Branch of lam: from the r-th zero of J_m' (m = 0: of J_1, the first zero above 0) to
        # the next zero of J_m.
        if m == 0:
            self.lo, self.hi = jnp_zeros(0, r)[-1], jn_zeros(0, r + 1)[-1]
        else:
            self.lo, self.hi = jnp_zeros(m, r)[-1], jn_zeros(m, r)[-1]

    def G(self, sh, kap, w):
        """Product form of physics.md section 5 (rho_a = 1, rho_j = s)."""
        m = self.m
        lam, ga = sh.lam(kap, w), sh.ga(kap, w)
        return lam * jvp(m, lam) * w * w * kv(m, ga) - sh.s * (w + kap * sh.M) ** 2 * ga * kvp(m, ga) * jv(m, lam)

    def dG(self, sh, kap, w):
        m, M = self.m, sh.M
        lam, ga = sh.lam(kap, w), sh.ga(kap, w)
        dlam = ((w + kap * M) * M - kap) / lam
        dga = kap / ga
        a = lam * jvp(m, lam)
        da = (jvp(m, lam) + lam * jvp(m, lam, 2)) * dlam
        b = kv(m, ga)
        db = kvp(m, ga) * dga
        u = sh.s * (w + kap * M) ** 2
        du = 2 * sh.s * M * (w + kap * M)
        v = ga * kvp(m, ga)
        dv = (kvp(m, ga) + ga * kvp(m, ga, 2)) * dga
        jm = jv(m, lam)
        djm = jvp(m, lam) * dlam
        return w * w * (da * b + a * db) - (du * v * jm + u * dv * jm + u * v * djm)

    def branch_lam(self, sh):
        """On the sonic line ga -> 0: ga K_m'/K_m -> -m (m >= 1), 0 (m = 0)."""
        if self.m == 0:
            return self.lo
        p = sh.s * (1 + sh.M / sh.c) ** 2 * self.m
        return brentq(lambda l: l * jvp(self.m, l) + p * jv(self.m, l), self.lo, self.hi, xtol=1e-15, rtol=1e-15)


class Planar:
    def __init__(self, symmetric, r):
        self.sym, self.r = symmetric, r
        self.lo, self.hi = ((r * math.pi, (r + 0.5) * math.pi) if symmetric else ((r - 0.5) * math.pi, r * math.pi))

    def G(self, sh, kap, w):
        lam, ga = sh.lam(kap, w), sh.ga(kap, w)
        u = sh.s * (w + kap * sh.M) ** 2
        if self.sym:  # lam tan(lam) / (s (w+kM)^2) = ga / w^2
            return lam * np.sin(lam) * w * w - u * ga * np.cos(lam)
        return lam * np.cos(lam) * w * w + u * ga * np.sin(lam)

    def dG(self, sh, kap, w, h=1e-7):
        return (self.G(sh, kap + h, w) - self.G(sh, kap - h, w)) / (2 * h)

    def branch_lam(self, sh):
        return self.lo


def kappa_range(mode, sh, w):
    """kappa from just off the sonic line to the kappa where lam reaches the branch's pole."""
    lo = w / sh.c * (1 + 1e-13)
    hi = sh.kappa_of_lam(mode.hi, w) if mode.hi > sh.lam(lo, w) else lo
    return lo, hi


def roots_at(mode, sh, w, n=3000):
    """Roots kappa of G at frequency w whose lam lies on the mode's branch, by a scan and brentq."""
    lo, hi = kappa_range(mode, sh, w)
    if hi <= lo:
        return []
    lam_lo = max(mode.lo, float(sh.lam(lo, w)))
    k0 = sh.kappa_of_lam(lam_lo, w) if lam_lo > float(sh.lam(lo, w)) else lo
    ks = np.linspace(k0, hi * (1 - 1e-12), n)
    g = mode.G(sh, ks, w)
    out = []
    for i in np.nonzero(np.sign(g[1:]) != np.sign(g[:-1]))[0]:
        out.append(brentq(lambda k: mode.G(sh, k, w), ks[i], ks[i + 1], xtol=1e-15, rtol=1e-15))
    return out


def saddle(mode, sh, w_b):
    """Highest frequency with two roots on the branch, then Newton on G = 0, dG/dkappa = 0."""
    ws = np.linspace(w_b * 1.0001, w_b * 3.0, 300)
    last = None
    for w in ws:
        r = roots_at(mode, sh, w, 1500)
        if len(r) >= 2:
            last = (w, r[0], r[1])
        elif last is not None:
            break
    if last is None:
        return None
    w, k = last[0], 0.5 * (last[1] + last[2])
    for _ in range(60):
        g, gk = mode.G(sh, k, w), mode.dG(sh, k, w)
        # Jacobian of (G, G_k) in (k, w) by central differences of the analytic G_k.
        h = 1e-6 * k
        gkk = (mode.dG(sh, k + h, w) - mode.dG(sh, k - h, w)) / (2 * h)
        hw = 1e-6 * w
        gw = (mode.G(sh, k, w + hw) - mode.G(sh, k, w - hw)) / (2 * hw)
        gkw = (mode.dG(sh, k, w + hw) - mode.dG(sh, k, w - hw)) / (2 * hw)
        det = gk * gkw - gw * gkk
        dk = (-g * gkw + gw * gk) / det
        dw = (-gk * gk + gkk * g) / det
        k, w = k + dk, w + dw
        if abs(dk) < 1e-15 * k and abs(dw) < 1e-15 * w:
            break
    return w, k


def upstream_kappa(mode, sh, w):
    """The root closest to the sonic line (the upstream branch)."""
    r = roots_at(mode, sh, w)
    return r[0] if r else None


def request(tones, mj, t, modes, planar=False, curve=0, cells=2):
    return tones.GuidedModesRequest(
        vortex_sheet=tones.VortexSheetJet(
            fully_expanded_mach_number=mj,
            static_temperature_ratio=t,
            geometry=tones.SHEET_GEOMETRY_PLANAR if planar else tones.SHEET_GEOMETRY_ROUND,
        ),
        options=tones.GuidedModeOptions(modes=modes, cell_modes=cells),
        curve_points=curve,
    )


def round_ids(tones):
    return [
        tones.GuidedModeId(shape=tones.MODE_SHAPE_ROUND, azimuthal_order=m, radial_order=r)
        for m, r in [(0, 1), (1, 1), (2, 1), (0, 2)]
    ]


def planar_ids(tones):
    return [
        tones.GuidedModeId(shape=s, radial_order=r)
        for s in (tones.MODE_SHAPE_PLANAR_SYMMETRIC, tones.MODE_SHAPE_PLANAR_ANTISYMMETRIC)
        for r in (1, 2)
    ]


def local_modes(planar):
    if planar:
        return [Planar(True, 1), Planar(True, 2), Planar(False, 1), Planar(False, 2)]
    return [Round(0, 1), Round(1, 1), Round(2, 1), Round(0, 2)]


GRID = [(mj, t) for mj in (1.05, 1.2, 1.4, 1.7, 2.0) for t in (0.5, 1.0, 2.0, 3.0)]


@pytest.mark.parametrize("planar", [False, True])
@pytest.mark.parametrize("mj,t", GRID)
def test_branch_and_saddle_points_match_scipy(stubs, mj, t, planar):
    tones, stub = stubs
    ids = planar_ids(tones) if planar else round_ids(tones)
    r = stub.GuidedModes(request(tones, mj, t, ids, planar))
    sh = Sheet(mj, t)
    assert math.isclose(r.sheet.sound_speed_ratio, sh.c, rel_tol=1e-14)
    assert math.isclose(r.sheet.density_ratio, sh.s, rel_tol=1e-14)
    mine = [Planar(True, 1), Planar(True, 2), Planar(False, 1), Planar(False, 2)] if planar else local_modes(False)
    for res, mode in zip(r.modes, mine):
        lam_b = mode.branch_lam(sh)
        w_b = lam_b / math.sqrt((1 + sh.M / sh.c) ** 2 - 1 / sh.c**2)
        w_srv = res.branch_point.strouhal_number * math.pi * mj
        assert math.isclose(w_srv, w_b, rel_tol=REL), (mj, t, res.mode, w_srv, w_b)
        assert math.isclose(-res.branch_point.wavenumber_times_length / 2, w_b / sh.c, rel_tol=REL)
        sd = saddle(mode, sh, w_b)
        if sd is None:
            assert not res.has_band, (mj, t, res.mode, "SciPy finds no saddle above the branch point")
            continue
        w_s, k_s = sd
        assert res.has_band, (mj, t, res.mode, "SciPy finds a saddle at", w_s)
        w_srv = res.saddle_point.strouhal_number * math.pi * mj
        k_srv = -res.saddle_point.wavenumber_times_length / 2
        assert math.isclose(w_srv, w_s, rel_tol=REL), (mj, t, res.mode, w_srv, w_s)
        assert math.isclose(k_srv, k_s, rel_tol=REL), (mj, t, res.mode, k_srv, k_s)


@pytest.mark.parametrize("mj,t", [(1.1, 1 / (1 + 0.2 * 1.1**2)), (1.3, 1 / (1 + 0.2 * 1.69)), (1.5, 0.7), (1.8, 2.5)])
def test_curve_points_and_closure_tones_match_scipy(stubs, mj, t):
    tones, stub = stubs
    r = stub.GuidedModes(request(tones, mj, t, round_ids(tones), curve=40))
    sh = Sheet(mj, t)
    checked = 0
    for res, mode in zip(r.modes, local_modes(False)):
        for p in res.curve[1:]:
            w = p.strouhal_number * math.pi * mj
            k = -p.wavenumber_times_length / 2
            if k / w - 1 / sh.c < 1e-6:
                continue  # hugging the sonic line: kappa is ill-conditioned there
            ks = roots_at(mode, sh, w)
            assert ks, (res.mode, w)
            best = min(ks, key=lambda x: abs(x - k))
            assert math.isclose(best, k, rel_tol=REL), (res.mode, w, k, ks)
            checked += 1
        for tone in res.tones:
            if tone.outcome != tones.CLOSURE_OUTCOME_IN_BAND:
                continue
            ks_n = tone.shock_wavenumber_times_length / 2
            uc = 0.7 * mj
            w_b = res.branch_point.strouhal_number * math.pi * mj
            w_s = res.saddle_point.strouhal_number * math.pi * mj

            def h(w):
                k = upstream_kappa(mode, sh, w)
                return k + w / uc - ks_n

            # Bracket: 1 % either side of the server's tone, within the band (close to the
            # branch point the upstream root of m = 0 hugs the sonic line and a scan misses it).
            w_srv = tone.tone.strouhal_number * math.pi * mj
            w_c = brentq(h, max(w_b * (1 + 1e-6), 0.99 * w_srv), min(w_s * (1 - 1e-9), 1.01 * w_srv), xtol=1e-15, rtol=1e-14)
            assert math.isclose(w_srv, w_c, rel_tol=REL), (res.mode, tone.cell_mode, w_srv, w_c)
            checked += 1
    assert checked > 20


def test_sonic_line_closure_reproduces_powell(stubs):
    """With k_s = j0,1 / (beta f) (vortex-sheet spacing, physics.md section 3), the closure
    kappa = omega / c on the sonic line is Powell's f = Uc / (Ls (1 + Mc)); the server's in-band
    tones must lie below it (the guided mode's kappa exceeds omega / c)."""
    tones, stub = stubs
    mj, t = 1.3, 1 / (1 + 0.2 * 1.69)
    r = stub.GuidedModes(request(tones, mj, t, round_ids(tones)))
    sh = Sheet(mj, t)
    beta = math.sqrt(mj * mj - 1)
    for res in r.modes:
        for tone in res.tones:
            ks = jn_zeros(0, tone.cell_mode)[-1] / beta
            assert math.isclose(tone.shock_wavenumber_times_length / 2, ks, rel_tol=1e-13)
            w_powell = ks / (1 / sh.c + 1 / (0.7 * mj))
            if tone.outcome == tones.CLOSURE_OUTCOME_IN_BAND:
                assert tone.tone.strouhal_number * math.pi * mj < w_powell
