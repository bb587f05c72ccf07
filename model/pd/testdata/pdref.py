#!/usr/bin/env python3
"""Independent numpy implementation of the phase-diversity objective.

Reads one case (JSON) from the file named on the command line and prints a
JSON object with the objective, its gradient, the object estimate and the
intermediate quantities of the data pre-processing. Used by
model/pd/numpy_test.go; it shares no code with the Go solver.

The objective (Gonsalves 1982, Opt. Eng. 21, 829; Paxman, Schulz & Fienup
1992, JOSA A 9, 1072; Loefdahl & Scharmer 1994, A&AS 107, 243):

    L  = sum_u M(u) [ sum_i |D_i|^2 - |sum_i conj(D_i) S_i|^2 / (g + sum_i |S_i|^2) ]
    E  = L / Pbar + w/2 sum (P a)^2 / sigma^2
    F  = sum_i D_i conj(S_i) / (g + sum_i |S_i|^2)

with D_i = fft2(win * (d_i - m_i)), S_i = fft2(|h_i|^2 / sum |h_i|^2),
h_i = ifft2(A exp(i phase_i)) (numpy's fft2/ifft2 conventions). The gradient
is obtained by reverse-mode differentiation written out step by step with
the cogradient convention dL = Re sum conj(g_z) dz for complex z; it passes
through ifft2 for the OTF step and keeps the derivative of the PSF
normalisation, unlike the Go code. A central-difference check of this
script's own gradient is printed as fd_rel_err.

With an "exact" entry (m, pad, mu) it evaluates instead the exact-edge
objective by dense linear algebra (exact_value) and its gradient by central
differences of that value.
"""
import json
import sys

import numpy as np


def window(n, frac):
    """Separable raised-cosine edge taper over frac*n pixels per edge."""
    if frac <= 0:
        frac = 0.125
    frac = min(frac, 0.5)
    t = max(frac * n, 1.0)
    i = np.arange(n)
    e = np.minimum(i + 0.5, n - i - 0.5)
    w1 = np.where(e >= t, 1.0, 0.5 * (1 - np.cos(np.pi * e / t)))
    return np.outer(w1, w1)


def blur_matrix(n, sigma):
    """Row-normalised truncated Gaussian (3 sigma, at most n-1 px): B @ d @ B.T
    is the normalised convolution of d within the patch."""
    r = min(int(np.ceil(3 * sigma)), n - 1)
    i = np.arange(n)
    d = i[:, None] - i[None, :]
    k = np.where(np.abs(d) <= r, np.exp(-0.5 * d * d / sigma**2), 0.0)
    return k / k.sum(axis=1, keepdims=True)


def signed(n):
    """Signed DFT frequencies, index >= (n+1)//2 negative."""
    k = np.arange(n)
    return np.where(k >= (n + 1) // 2, k - n, k)


class Case:
    def __init__(self, c):
        self.n = n = c["n"]
        self.frames = c["frames"]
        self.nch = c["channels"]
        self.count = c["modes"]
        self.nimg = self.frames * self.nch
        self.amp = np.array(c["pupil_amp"], float).reshape(n, n)
        self.modes = np.array(c["modes_grid"], float).reshape(self.count, n, n)
        self.div = np.array(c["diversity"], float).reshape(self.nch, n, n)
        self.gamma = c["gamma"] * self.nimg
        self.w = c["prior_weight"]
        self.inv_var = np.array(c["inv_var"], float)
        self.tilt = c["tilt_constrain"]
        self.tdirs = np.array(c["tilt_dirs"], float).reshape(-1, self.count)
        self.fit_off = c["fit_offset"]
        self.noff = 2 * (self.nch - 1) if self.fit_off else 0
        # Shift ramp: -2 pi (dx (x - n/2) + dy (y - n/2)) / n.
        y, x = np.mgrid[0:n, 0:n].astype(float)
        self.rx = -2 * np.pi * (x - n // 2) / n
        self.ry = -2 * np.pi * (y - n // 2) / n
        self.preprocess(c)

    def preprocess(self, c):
        n = self.n
        data = np.array(c["data"], float).reshape(self.nch, self.frames, n, n)
        win = window(n, c["window"])
        spec = np.empty((self.nimg, n, n), complex)
        hps = c.get("high_pass", 0.0)
        hspec = np.empty((self.nimg, n, n), complex)
        bm = blur_matrix(n, hps * n) if hps > 0 else None
        levels = []
        for j in range(self.frames):
            for k in range(self.nch):
                d = data[k, j]
                m = (win * d).sum() / win.sum()
                levels.append(m)
                spec[j * self.nch + k] = np.fft.fft2(win * (d - m))
                if bm is not None:
                    f = d - bm @ d @ bm.T
                    mf = (win * f).sum() / win.sum()
                    hspec[j * self.nch + k] = np.fft.fft2(win * (f - mf))
        self.level = float(np.mean(levels))
        pw = (np.abs(spec) ** 2).sum(axis=0)
        fy, fx = np.meshgrid(signed(n), signed(n), indexing="ij")
        r = np.hypot(fy, fx)
        cutoff = 2 * c["radius"]
        far = r > cutoff + 1
        self.noise = float(pw[far].mean() / self.nimg) if far.any() else 0.0
        # 3x3 box mean with wrap-around, per image.
        sm = sum(np.roll(np.roll(pw, dy, 0), dx, 1) for dy in (-1, 0, 1) for dx in (-1, 0, 1))
        sm = sm / 9 / self.nimg
        neg = np.roll(np.roll(sm[::-1, ::-1], 1, 0), 1, 1)  # sm(-u)
        p = np.minimum(sm, neg)
        keep = r < cutoff
        keep[0, 0] = False
        if self.noise > 0 and c["noise_filter"]:
            keep &= p > c["noise_threshold"] * self.noise
        if self.noise > 0:
            with np.errstate(divide="ignore"):
                filt = np.clip(1 - self.noise / p, 0, None)
        else:
            filt = np.ones((n, n))
        self.mask = np.flatnonzero(keep.ravel())
        self.filt = filt.ravel()[self.mask]
        # The metric sees the high-passed spectra, the object estimate of
        # the restoration the raw ones.
        self.draw = spec.reshape(self.nimg, -1)[:, self.mask]
        self.dm = self.draw if bm is None else hspec.reshape(self.nimg, -1)[:, self.mask]
        self.dpow = float((np.abs(self.dm) ** 2).sum())
        self.pbar = self.dpow / self.nimg

    def project(self, a):
        """Remove the burst mean along each orthonormal tilt direction."""
        if not self.tilt:
            return a
        A = a.reshape(self.frames, self.count)
        mean = (A @ self.tdirs.T).mean(axis=0)
        return (A - mean @ self.tdirs).ravel()

    def phases(self, ap, off):
        A = ap.reshape(self.frames, self.count)
        for j in range(self.frames):
            phi = np.tensordot(A[j], self.modes, axes=1)
            for k in range(self.nch):
                ph = phi + self.div[k]
                if self.fit_off and k > 0:
                    ph = ph + off[2 * (k - 1)] * self.rx + off[2 * (k - 1) + 1] * self.ry
                yield j, k, ph

    def forward(self, x):
        nt = self.frames * self.count
        ap, off = self.project(np.asarray(x[:nt], float)), np.asarray(x[nt:], float)
        st = []
        for j, k, ph in self.phases(ap, off):
            P = self.amp * np.exp(1j * ph)
            h = np.fft.ifft2(P)
            I = np.abs(h) ** 2
            C = I.sum()
            S = np.fft.fft2(I / C)
            st.append((j, k, P, h, I, C, S.ravel()[self.mask]))
        Sm = np.array([s[-1] for s in st])
        Acoef = (np.conj(self.dm) * Sm).sum(axis=0)
        B = self.gamma + (np.abs(Sm) ** 2).sum(axis=0)
        L = self.dpow - float((np.abs(Acoef) ** 2 / B).sum())
        prior = 0.5 * self.w * float((ap.reshape(self.frames, self.count) ** 2 * self.inv_var).sum())
        return ap, off, st, Sm, Acoef, B, L, prior

    def value(self, x):
        _, _, _, _, _, _, L, prior = self.forward(x)
        return L / self.pbar + prior

    def evaluate(self, x):
        n = self.n
        ap, off, st, Sm, Acoef, B, L, prior = self.forward(x)
        gA = np.zeros((self.frames, self.count))
        goff = np.zeros(self.noff)
        for i, (j, k, P, h, I, C, _) in enumerate(st):
            gS = -2 * Acoef * self.dm[i] / B + 2 * np.abs(Acoef) ** 2 * Sm[i] / B ** 2
            full = np.zeros(n * n, complex)
            full[self.mask] = gS
            gs = np.real(n * n * np.fft.ifft2(full.reshape(n, n)))
            s = I / C
            gI = (gs - (gs * s).sum()) / C
            gh = 2 * gI * h
            gP = np.fft.fft2(gh) / (n * n)
            gphi = -np.imag(np.conj(gP) * P) / self.pbar
            gA[j] += np.tensordot(self.modes, gphi, axes=([1, 2], [0, 1]))
            if self.fit_off and k > 0:
                goff[2 * (k - 1)] += (gphi * self.rx).sum()
                goff[2 * (k - 1) + 1] += (gphi * self.ry).sum()
        gA += self.w * ap.reshape(self.frames, self.count) * self.inv_var
        grad = np.concatenate([self.project(gA.ravel()), goff])
        F = (self.draw * np.conj(Sm)).sum(axis=0) / B
        full = np.zeros(n * n, complex)
        full[self.mask] = F * self.filt
        rest = np.real(np.fft.ifft2(full.reshape(n, n))).ravel() + self.level
        return L / self.pbar + prior, L / self.pbar, prior, grad, rest


def exact_value(case, c, x):
    """The exact-edge objective by dense linear algebra: the object on an
    m x m grid, each image the crop (rows and columns pad..pad+n-1) of the
    circular convolution on that grid with the origin-centred n x n PSF,
    the object eliminated by solving the regularised normal equations
    directly. Returns E = n^2 J / Pbar + prior."""
    n, m, pad, mu = case.n, c["exact"]["m"], c["exact"]["pad"], c["exact"]["mu"]
    data = np.array(c["data"], float).reshape(case.nch, case.frames, n, n)
    level = data.mean()
    nt = case.frames * case.count
    ap, off = case.project(np.asarray(x[:nt], float)), np.asarray(x[nt:], float)
    r = signed(n)
    lhs = mu * np.eye(m * m)
    rhs = np.zeros(m * m)
    ks, ds = [], []
    for j, k, ph in case.phases(ap, off):
        I = np.abs(np.fft.ifft2(case.amp * np.exp(1j * ph))) ** 2
        s = I / I.sum()
        K = np.zeros((n * n, m * m))
        rows = np.arange(n * n)
        y, xx = rows // n, rows % n
        for a in range(n):
            for b in range(n):
                cols = ((y + pad - r[a]) % m) * m + (xx + pad - r[b]) % m
                K[rows, cols] += s[a, b]
        d = (data[k, j] - level).ravel()
        lhs += K.T @ K
        rhs += K.T @ d
        ks.append(K)
        ds.append(d)
    o = np.linalg.solve(lhs, rhs)
    J = sum(float(((K @ o - d) ** 2).sum()) for K, d in zip(ks, ds)) + mu * float((o ** 2).sum())
    prior = 0.5 * case.w * float((ap.reshape(case.frames, case.count) ** 2 * case.inv_var).sum())
    return n * n * J / case.pbar + prior


def central_diff(f, x, h=1e-6):
    """Central differences of the scalar function f at x, step h."""
    fd = np.empty_like(x)
    for i in range(len(x)):
        xp, xm = x.copy(), x.copy()
        xp[i] += h
        xm[i] -= h
        fd[i] = (f(xp) - f(xm)) / (2 * h)
    return fd


def main_exact(case, c, x):
    value = exact_value(case, c, x)
    fd = central_diff(lambda v: exact_value(case, c, v), x)
    json.dump({"value": value, "grad": fd.tolist()}, sys.stdout)


def main():
    with open(sys.argv[1]) as f:
        c = json.load(f)
    case = Case(c)
    x = np.array(c["alpha"], float)
    if c.get("exact"):
        main_exact(case, c, x)
        return
    value, metric, prior, grad, rest = case.evaluate(x)
    # Own sanity check: central differences of this script's value.
    fd = central_diff(case.value, x)
    fd_err = float(np.abs(fd - grad).max() / np.abs(grad).max())
    out = {
        "value": value, "metric": metric, "prior": prior,
        "grad": grad.tolist(), "restored": rest.tolist(),
        "noise": case.noise, "level": case.level, "data_power": case.pbar,
        "mask": case.mask.tolist(), "fd_rel_err": fd_err,
    }
    json.dump(out, sys.stdout)


if __name__ == "__main__":
    main()
