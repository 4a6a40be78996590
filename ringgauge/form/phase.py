"""Surface-height map from three or more frames with unknown, unequal gap steps (and small tilt changes).

At the bench the gap changes between frames by amounts nobody controls (the part settles, warms or is pressed
lightly) and the part may rock a little. Each frame n is modelled as

    I_n(x) = a(x) + b(x) cos(phi(x) + delta_n(x)),   delta_n(x) = d_n + t_xn u + t_yn v   (delta_1 = 0)

with a the background, b the fringe amplitude, phi the phase of the first frame and delta_n the step of frame n,
a piston plus a tilt over the normalised aperture (u, v). The advanced iterative algorithm alternates two least-
squares problems: with the steps known, (a, b cos phi, b sin phi) per pixel; with the phase known, (d_n, t_n)
per frame [Z. Wang and B. Han, "Advanced iterative algorithm for phase extraction of randomly phase-shifted
interferograms", Opt. Lett. 29(14), 1671-1673 (2004); the per-frame tilt is the extension used here]. The
start comes from the principal-component method [J. Vargas, J. A. Quiroga and T. Belenguer, "Phase-shifting
interferometry based on principal component analysis", Opt. Lett. 36(8), 1326-1328 (2011)]. The phase is
unwrapped with ``skimage.restoration.unwrap_phase`` [M. A. Herraez et al., Appl. Opt. 41(35), 7437 (2002)].

Both methods leave one global sign open: (phi, delta) and (-phi, -delta) give the same frames. In reflection a
gap of W fringes gives I = a - b cos(2 pi W), so phi = 2 pi W + const, and a gap growing by s fringes moves the
phase by +2 pi s. The operator's statement of how the gap changed ("increasing" / "decreasing") therefore fixes
the orientation, and with it the sign of the surface's departure.

Zernike terms of the map are given in the ANSI Z80.28 / ISO 24157 single index j = (n (n + 2) + m) / 2 with the
standard normalisation (orthonormal over the unit disc: N = sqrt(2 (n + 1) / (1 + delta_m0)), cos for m > 0,
sin for m < 0), over the test diameter, in nanometres of surface height.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from ..errors import AnalysisError

GAP_CHANGES = ("increasing", "decreasing")


# ------------------------------------------------------------------------------------------------ Zernike (ANSI)

def ansi_index(n: int, m: int) -> int:
    """ANSI Z80.28 single index j = (n (n + 2) + m) / 2."""
    return (n * (n + 2) + m) // 2


def ansi_nm(j: int) -> tuple[int, int]:
    """(n, m) of the ANSI Z80.28 single index j."""
    n = int(math.ceil((-3 + math.sqrt(9 + 8 * j)) / 2))
    m = 2 * j - n * (n + 2)
    return n, m


def zernike_ansi(n: int, m: int, rho, theta) -> np.ndarray:
    """Normalised Zernike circle polynomial Z_n^m (ANSI Z80.28): N R_n^|m|(rho) cos(m theta) for m >= 0 and
    -N R_n^|m|(rho) sin(m theta) = N R sin(|m| theta) for m < 0, with N = sqrt(2 (n + 1) / (1 + delta_m0))."""
    if (n - abs(m)) % 2 or abs(m) > n:
        raise ValueError(f"no Zernike polynomial with n = {n}, m = {m}")
    am = abs(m)
    rho = np.asarray(rho, dtype=np.float64)
    R = np.zeros_like(rho)
    for k in range((n - am) // 2 + 1):
        c = (-1) ** k * math.factorial(n - k) / (
            math.factorial(k) * math.factorial((n + am) // 2 - k) * math.factorial((n - am) // 2 - k)
        )
        R = R + c * rho ** (n - 2 * k)
    N = math.sqrt(2 * (n + 1) / (1 + (m == 0)))
    if m > 0:
        return N * R * np.cos(am * np.asarray(theta))
    if m < 0:
        return N * R * np.sin(am * np.asarray(theta))
    return N * R


def zernike_fit(W, u, v, n_max: int = 8):
    """Least-squares ANSI Zernike coefficients (same unit as W) of samples W at points (u, v) of the unit disc,
    j = 0 .. (n_max + 1)(n_max + 2)/2 - 1. Returns (coefficients, design matrix)."""
    rho = np.hypot(u, v)
    th = np.arctan2(v, u)
    J = (n_max + 1) * (n_max + 2) // 2
    X = np.stack([zernike_ansi(*ansi_nm(j), rho, th) for j in range(J)], axis=1)
    coef, *_ = np.linalg.lstsq(X, W, rcond=None)
    return coef, X


# ------------------------------------------------------------------------------------------------ phase steps

def _pixel_solve(I, cosd, sind):
    """Per pixel least squares of I_n = a + c cos(delta_n) - s sin(delta_n): (a, c, s), and the residual RMS.

    I, cosd, sind : (N, P) arrays (frames x pixels). The 3x3 normal equations are solved in closed form."""
    N = I.shape[0]
    s11 = float(N)
    s1c = cosd.sum(0)
    s1s = -sind.sum(0)
    scc = (cosd * cosd).sum(0)
    scs = -(cosd * sind).sum(0)
    sss = (sind * sind).sum(0)
    y1 = I.sum(0)
    yc = (I * cosd).sum(0)
    ys = -(I * sind).sum(0)
    A = np.empty(cosd.shape[1:] + (3, 3))
    A[..., 0, 0] = s11
    A[..., 0, 1] = A[..., 1, 0] = s1c
    A[..., 0, 2] = A[..., 2, 0] = s1s
    A[..., 1, 1] = scc
    A[..., 1, 2] = A[..., 2, 1] = scs
    A[..., 2, 2] = sss
    rhs = np.stack([y1, yc, ys], axis=-1)
    det = np.linalg.det(A)
    ok = np.abs(det) > 1e-9 * np.maximum(1.0, np.abs(A).max(axis=(-1, -2))) ** 3
    sol = np.zeros_like(rhs)
    if ok.any():
        sol[ok] = np.linalg.solve(A[ok], rhs[ok][..., None])[..., 0]
    a, c, s = sol[:, 0], sol[:, 1], sol[:, 2]
    model = a[None, :] + c[None, :] * cosd - s[None, :] * sind
    rms = np.sqrt(np.mean((model - I) ** 2, axis=0))
    return a, c, s, rms, ok


def _frame_steps(I, phi, u, v, delta0, tilt: bool, iterations: int = 3):
    """Per frame: I_n = A_n(u, v) + B_n(u, v) cos(phi + delta_n), delta_n = d_n + t_x u + t_y v, with A_n and
    B_n quadratic polynomials (the frame's light and fringe amplitude, solved linearly for each trial) and
    delta_n by Gauss-Newton. Smooth A, B (rather than the per-pixel a, b of the pixel step) keep the problem
    determined with three frames, where the per-pixel model fits any steps exactly; the original algorithm
    takes them uniform over the frame [Wang & Han 2004]."""
    P = np.stack([np.ones_like(u), u, v, u * u, u * v, v * v], axis=1)

    def residual(n, arg):
        # the frame's smooth light and amplitude, solved linearly for this trial phase
        X = np.hstack([P, P * np.cos(arg)[:, None]])
        XtX = X.T @ X
        lin = np.linalg.solve(XtX + 1e-12 * np.trace(XtX) * np.eye(12), X.T @ I[n])
        return X @ lin - I[n], P @ lin[6:]

    return _gauss_newton_steps(I.shape[0], phi, u, v, delta0, tilt, iterations, residual)


def _frame_steps_pixel(I, a, b, phi, u, v, delta0, tilt: bool, iterations: int = 4):
    """Per frame Gauss-Newton fit of delta_n = d_n + t_x u + t_y v to I_n = a + b cos(phi + delta_n), with the
    per-pixel a, b of the pixel step (four or more frames: they are then over-determined)."""
    def residual(n, arg):
        return a + b * np.cos(arg) - I[n], b

    return _gauss_newton_steps(I.shape[0], phi, u, v, delta0, tilt, iterations, residual)


def _gauss_newton_steps(n_frames, phi, u, v, delta0, tilt: bool, iterations: int, residual):
    """Damped Gauss-Newton for each frame's step delta_n = d_n (+ t_x u + t_y v with ``tilt``) in a model
    I_n = A + B cos(phi + delta_n); ``residual(n, arg)`` gives (model - I_n, B) at the trial phase ``arg``."""
    out = np.array(delta0, dtype=float)
    k = 3 if tilt else 1
    G = np.stack([np.ones_like(u), u, v], axis=1)[:, :k]
    for n in range(n_frames):
        q = out[n, :k].copy()
        for _ in range(iterations):
            arg = phi + G @ q
            r, amp = residual(n, arg)
            Jm = G * (-amp * np.sin(arg))[:, None]
            A = Jm.T @ Jm
            try:
                dq = np.linalg.solve(A + 1e-9 * np.trace(A) * np.eye(k), -Jm.T @ r)
            except np.linalg.LinAlgError:
                break
            q += dq
            if np.max(np.abs(dq)) < 1e-7:
                break
        out[n, :k] = q
    return out


def _projected_cost(I, u, v, steps):
    delta = steps[:, :1] + steps[:, 1:2] * u[None, :] + steps[:, 2:3] * v[None, :]
    cosd, sind = np.cos(delta), np.sin(delta)
    a, c, s, rms, ok = _pixel_solve(I, cosd, sind)
    return float(np.sum(rms**2) * I.shape[0]), (a, c, s, cosd, sind, rms, ok)


def _joint_refine(I, u, v, steps, tilt: bool, iterations: int = 12):
    """Gauss-Newton on the frame steps with the per-pixel (a, b cos phi, b sin phi) projected out (variable
    projection, Kaufman's Jacobian: G. H. Golub and V. Pereyra, SIAM J. Numer. Anal. 10, 413 (1973);
    L. Kaufman, BIT 15, 49 (1975)). The alternation of the advanced iterative algorithm converges linearly
    along the weakly coupled tilt directions; this joint step converges in a few rounds.

    For pixel p with design X_p = [1, cos delta_n, -sin delta_n] (N x 3) and hat matrix H_p, the projected
    Jacobian of frame n's step parameter j is g_n G_j (e_n - H_p e_n), g_n = -b sin(phi + delta_n), G = (1, u, v);
    the normal matrix is sum_p [(g g^T) o (I - H_p)]_{n n'} G_j G_j'.
    """
    N = I.shape[0]
    k = 3 if tilt else 1
    G = np.stack([np.ones_like(u), u, v], axis=1)[:, :k]
    cost, parts = _projected_cost(I, u, v, steps)
    lam = 1e-4
    for _ in range(iterations):
        a, c, s, cosd, sind, rms, ok = parts
        X = np.stack([np.ones_like(cosd), cosd, -sind], axis=-1).transpose(1, 0, 2)  # (P, N, 3)
        A = np.einsum("pni,pnj->pij", X, X)
        A[~ok] = np.eye(3)
        Ainv = np.linalg.inv(A)
        Hm = np.einsum("pni,pij,pmj->pnm", X, Ainv, X)
        g = -(c[None, :] * sind + s[None, :] * cosd).T  # (P, N): d model / d delta_n
        r = (a[None, :] + c[None, :] * cosd - s[None, :] * sind - I).T  # (P, N)
        Q = g[:, :, None] * g[:, None, :] * (np.eye(N)[None] - Hm)
        Q[~ok] = 0.0
        M = np.einsum("pab,pj,pk->ajbk", Q, G, G).reshape(N * k, N * k)
        grad = np.einsum("pn,pj->nj", np.where(ok[:, None], g * r, 0.0), G).reshape(N * k)
        M = M[k:, k:]
        grad = grad[k:]
        improved = False
        for _ in range(8):
            try:
                d = np.linalg.solve(M + lam * np.diag(np.diag(M) + 1e-12), -grad)
            except np.linalg.LinAlgError:
                lam *= 10
                continue
            trial = steps.copy()
            trial[1:, :k] += d.reshape(N - 1, k)
            c_new, p_new = _projected_cost(I, u, v, trial)
            if c_new < cost:
                steps, cost, parts = trial, c_new, p_new
                lam = max(lam / 10, 1e-9)
                improved = True
                break
            lam *= 10
        if not improved or np.max(np.abs(d)) < 1e-6:
            break
    return steps


def pca_phase(I):
    """Principal-component phase of frames I (N, P) [Vargas et al. 2011]: the temporal mean is removed, the first
    two principal components are taken as b cos(phi) and b sin(phi). Returns phi (P,) up to sign and offset."""
    X = I - I.mean(axis=0, keepdims=True)
    # N x N covariance is cheap (N frames); its eigenvectors give the principal components as X^T w
    C = X @ X.T
    w, V = np.linalg.eigh(C)
    order = np.argsort(w)[::-1]
    p1 = V[:, order[0]] @ X
    p2 = V[:, order[1]] @ X
    return np.arctan2(p2, p1)


@dataclass
class StepResult:
    """Result of the unknown-step algorithm on a set of pixels."""

    phi: np.ndarray  # wrapped phase of frame 1 at the pixels (rad)
    modulation: np.ndarray  # b at the pixels
    background: np.ndarray  # a at the pixels
    residual_rms: np.ndarray  # per-pixel RMS misfit over the frames (0 for three frames)
    steps: np.ndarray  # (N, 3): piston (rad), tilt u, tilt v of each frame relative to frame 1
    iterations: int
    converged: bool


def unknown_steps(I, u, v, *, tilt: bool = True, max_iter: int = 40, tol: float = 1e-3) -> StepResult:
    """Advanced iterative algorithm [Wang & Han 2004] with per-frame piston and tilt, started from PCA.

    I : (N, P) intensities of N >= 3 frames at P pixels; u, v : (P,) normalised coordinates.
    The alternation converges linearly; it stops when no step or tilt moves by more than ``tol`` radians
    (1e-3 rad = 0.00016 fringe) in a round. With five or more frames, joint Gauss-Newton rounds
    (:func:`_joint_refine`) finish it after a few alternations.
    """
    I = np.asarray(I, dtype=np.float64)
    N = I.shape[0]
    if N < 3:
        raise AnalysisError("a phase map needs at least three frames with the gap changed between them")
    phi = pca_phase(I)
    a = I.mean(axis=0)
    b = np.sqrt(2.0 * np.mean((I - a) ** 2, axis=0))
    steps = np.zeros((N, 3))
    # start steps by linear least squares: I_n - a = (b cos phi) cos d_n - (b sin phi) sin d_n, so the two
    # regression coefficients give d_n directly (Gauss-Newton from d = 0 stalls when a step is near pi)
    Xs = np.stack([b * np.cos(phi), -b * np.sin(phi)], axis=1)
    coef, *_ = np.linalg.lstsq(Xs, (I - a).T, rcond=None)
    steps[:, 0] = np.arctan2(coef[1], coef[0])
    it = 0
    converged = False
    for it in range(1, max_iter + 1):
        # three or four frames: smooth per-frame light and amplitude (with a per-pixel background and amplitude
        # any three steps fit three frames exactly, and four frames leave a one-parameter family of step sets
        # that fit exactly: the frames' span must hold 1, cos delta and sin delta); five or more: per pixel
        if N <= 4:
            new = _frame_steps(I, phi, u, v, steps, tilt)
        else:
            new = _frame_steps_pixel(I, a, b, phi, u, v, steps, tilt)
        # re-reference to frame 1: its step becomes zero and is moved into the phase
        ref = new[0].copy()
        new = new - ref
        d_ref = ref[0] + ref[1] * u + ref[2] * v
        phi = phi + d_ref
        delta = new[:, :1] + new[:, 1:2] * u[None, :] + new[:, 2:3] * v[None, :]
        a, c, s, rms, ok = _pixel_solve(I, np.cos(delta), np.sin(delta))
        phi = np.arctan2(s, c)
        b = np.hypot(c, s)
        change = float(np.max(np.abs(np.angle(np.exp(1j * (new[:, 0] - steps[:, 0]))))))
        change = max(change, float(np.max(np.abs(new[:, 1:] - steps[:, 1:]))) if tilt else 0.0)
        steps = new
        if change < tol:
            converged = True
            break
        if it >= 4 and N >= 5 and change < 0.05:
            # close enough for the joint Gauss-Newton rounds, which settle the slow directions; kept only when
            # they stay within a radian of the alternation's steps and do not head for a degenerate step set
            # (steps bunched at two phases half a turn apart, where the per-pixel model fits anything)
            joint = _joint_refine(I, u, v, steps, tilt)
            moved = float(np.max(np.abs(np.angle(np.exp(1j * (joint[:, 0] - steps[:, 0]))))))
            spread = abs(np.mean(np.exp(2j * joint[:, 0])))
            if moved > 1.0 or spread > 0.95:
                continue
            steps = joint
            delta = steps[:, :1] + steps[:, 1:2] * u[None, :] + steps[:, 2:3] * v[None, :]
            a, c, s, rms, ok = _pixel_solve(I, np.cos(delta), np.sin(delta))
            phi = np.arctan2(s, c)
            b = np.hypot(c, s)
            converged = True
            break
    return StepResult(phi=phi, modulation=b, background=a, residual_rms=rms, steps=steps, iterations=it,
                      converged=converged)


# ------------------------------------------------------------------------------------------------ the map

@dataclass
class PhaseMap:
    """Surface departure from the frames, in fringes of gap (one fringe = lambda / (2 n))."""

    gap_fringes: np.ndarray  # (rows, cols) over the crop, NaN outside the aperture or where masked
    crop_origin_px: tuple[int, int]  # (x0, y0) of the map's first pixel in the frame
    stride: int  # frame pixels between neighbouring map pixels
    centre_px: tuple[float, float]
    radius_px: float
    aspect: float
    steps_fringes: tuple[float, ...]  # piston of each frame from frame 1 (oriented; consecutive steps taken
    #                                   within half a fringe and summed)
    tilts_fringes: tuple[tuple[float, float], ...]  # tilt change of each frame (fringes per radius, u and v)
    orientation: int  # +1 / -1 applied to the algorithm's phase; 0 = the steps did not decide
    orientation_detail: str
    modulation: float  # median fringe visibility b / a
    phase_noise_fringes: float  # per-pixel standard deviation of the map from the frames' misfit (fringes)
    masked: np.ndarray  # (rows, cols) bool: left out (dust, no fringe modulation)
    iterations: int
    converged: bool
    n_frames: int
    notes: tuple[str, ...] = field(default_factory=tuple)

    def pixel_xy(self):
        """Frame column and row of the map's columns and rows."""
        H, W = self.gap_fringes.shape
        x0, y0 = self.crop_origin_px
        return x0 + self.stride * np.arange(W), y0 + self.stride * np.arange(H)

    def pixel_coords(self):
        """Normalised aperture coordinates (u of the columns, v of the rows)."""
        xs, ys = self.pixel_xy()
        return (xs - self.centre_px[0]) / self.radius_px, (ys - self.centre_px[1]) * self.aspect / self.radius_px


def phase_map(*args, **kwargs) -> PhaseMap:
    """See :func:`_phase_map` (run with the BLAS library held to one thread: small matrices, busy machine)."""
    from ..blas import one_thread

    with one_thread():
        return _phase_map(*args, **kwargs)


def _phase_map(images, centre_px, radius_px, *, aspect: float = 1.0, gap_change: str = "increasing",
              exclude=None, inset: float = 0.985, edge_px: float = 3.0, sample: int = 8000,
              progress=None) -> PhaseMap:
    """Height map (in fringes of gap) over the aperture from N >= 3 frames with unknown steps.

    Steps and tilts are found on a regular sample of about ``sample`` pixels; the phase of every pixel then
    follows from one per-pixel least-squares solve with those steps.
    """
    if gap_change not in GAP_CHANGES:
        raise AnalysisError(f"gap change must be one of {', '.join(GAP_CHANGES)}, got {gap_change!r}")
    frames = [np.asarray(f, dtype=np.float32) for f in images]
    if len(frames) < 3:
        raise AnalysisError("a phase map needs at least three frames with the gap changed between them")
    H, W = frames[0].shape
    cx, cy = centre_px
    ry = radius_px / aspect
    x0, x1 = max(0, int(math.floor(cx - radius_px))), min(W, int(math.ceil(cx + radius_px)) + 1)
    y0, y1 = max(0, int(math.floor(cy - ry))), min(H, int(math.ceil(cy + ry)) + 1)
    uc = (np.arange(x0, x1) - cx) / radius_px
    vr = (np.arange(y0, y1) - cy) * aspect / radius_px
    rho2 = uc[None, :] ** 2 + vr[:, None] ** 2
    r_use = min(inset, 1.0 - edge_px / radius_px)
    inside = rho2 <= r_use**2
    if exclude is not None:
        inside &= ~np.asarray(exclude[y0:y1, x0:x1], dtype=bool)
    n_in = int(inside.sum())
    if n_in < 500:
        raise AnalysisError("too few pixels inside the aperture for a phase map (under 500)")
    stack = np.stack([f[y0:y1, x0:x1] for f in frames])  # (N, rows, cols) float32
    stride = max(1, int(math.ceil(math.sqrt(n_in / sample))))
    sub = np.zeros_like(inside)
    sub[::stride, ::stride] = True
    sub &= inside
    iy, ix = np.nonzero(sub)
    if progress:
        progress(f"phase steps from {len(frames)} frames on {iy.size} pixels")
    su, sv = uc[ix], vr[iy]
    res = unknown_steps(stack[:, iy, ix].astype(np.float64), su, sv, tilt=True)
    steps = res.steps
    # a pixel-sample with large misfit (dust that moved, a glint) would bias the steps: refit without them
    if len(frames) > 3:
        bad = res.residual_rms > 4 * 1.4826 * np.median(res.residual_rms) + 1e-9
        bad |= res.modulation < 0.25 * np.median(res.modulation)
        if bad.any() and (~bad).sum() > 200:
            res = unknown_steps(stack[:, iy[~bad], ix[~bad]].astype(np.float64), su[~bad], sv[~bad], tilt=True)
            steps = res.steps
    # orientation from the stated gap change: consecutive steps wrapped to (-pi, pi]
    d = steps[:, 0]
    consec = np.angle(np.exp(1j * np.diff(d)))
    want = 1.0 if gap_change == "increasing" else -1.0
    signs = np.sign(consec)
    small = np.abs(consec) < 2 * np.pi * 0.02
    near_half = np.abs(consec) > 2 * np.pi * 0.45
    usable = ~(small | near_half)
    notes = []
    if not usable.any():
        orientation, detail = 0, ("no frame step between 0.02 and 0.45 fringe: the direction of the fringes' "
                                  "motion cannot be read")
    elif np.all(signs[usable] == signs[usable][0]):
        orientation = int(signs[usable][0] * want)
        detail = (f"{len(consec)} frame step(s) of "
                  f"{', '.join(f'{orientation * want * c / (2 * np.pi):+.3f}' for c in consec)} fringe with the "
                  f"gap {gap_change}")
    else:
        orientation, detail = 0, ("the frame steps go both ways "
                                  f"({', '.join(f'{c / (2 * np.pi):+.3f}' for c in consec)} fringe); "
                                  "the gap did not change in one direction, so the sign is not taken from them")
    o = orientation if orientation else 1
    # per-pixel phase with the found steps, on a grid of at most ~250 px across the aperture radius (the
    # form terms need Zernike degree 8 at most; a 1.3-megapixel frame's map is taken every second pixel)
    if progress:
        progress("phase of every pixel")
    q = max(1, int(math.ceil(radius_px / 250)))
    if q > 1:
        stack = stack[:, ::q, ::q]
        inside = inside[::q, ::q]
        uc, vr = uc[::q], vr[::q]
    py, px_ = np.nonzero(inside)
    pu, pv = uc[px_], vr[py]
    delta = steps[:, :1] + steps[:, 1:2] * pu[None, :] + steps[:, 2:3] * pv[None, :]
    Ipix = stack[:, py, px_].astype(np.float64)
    a, c, s, rms, ok = _pixel_solve(Ipix, np.cos(delta), np.sin(delta))
    del delta
    b = np.hypot(c, s)
    phi = np.arctan2(s, c)
    mod_med = float(np.median(b))
    badpix = ~ok | (b < 0.25 * mod_med)
    if len(frames) > 3:
        badpix |= rms > 4 * 1.4826 * np.median(rms) + 1e-9
    bad_map = np.zeros(inside.shape, bool)
    bad_map[py[badpix], px_[badpix]] = True
    bad_map = ndimage.binary_dilation(ndimage.binary_opening(bad_map), iterations=2) & inside
    good = inside & ~bad_map
    wrapped = np.zeros(inside.shape)
    wrapped[py, px_] = phi
    # unwrap (the map grid is at most ~250 px per aperture radius, so the whole map is unwrapped directly)
    if progress:
        progress("unwrapping")
    from skimage.restoration import unwrap_phase

    q_map = q
    unwrapped = unwrap_phase(np.ma.masked_array(wrapped, mask=~good)).filled(np.nan)
    gap = np.full(inside.shape, np.nan)
    gap[good] = o * unwrapped[good] / (2 * np.pi)
    # the misfit over the frames (N > 3) as phase noise: sigma_phi = sigma_I / (b sqrt(N / 2))
    N = len(frames)
    if N > 3:
        sig_i = float(np.median(rms[~badpix])) * math.sqrt(N / (N - 3))
    else:
        sig_i = float("nan")
    noise = sig_i / (mod_med * math.sqrt(N / 2)) / (2 * np.pi) if np.isfinite(sig_i) else float("nan")
    vis = float(np.median(b[~badpix] / np.maximum(np.abs(a[~badpix]), 1e-9)))
    if not res.converged:
        notes.append(f"the phase-step iteration did not settle in {res.iterations} rounds")
    return PhaseMap(
        gap_fringes=gap, crop_origin_px=(x0, y0), stride=q_map, centre_px=(float(cx), float(cy)),
        radius_px=float(radius_px),
        aspect=float(aspect),
        steps_fringes=tuple(float(o * x / (2 * np.pi)) for x in np.concatenate([[0.0], np.cumsum(consec)])),
        tilts_fringes=tuple((float(o * t[1] / (2 * np.pi)), float(o * t[2] / (2 * np.pi))) for t in steps),
        orientation=orientation, orientation_detail=detail, modulation=vis, phase_noise_fringes=noise,
        masked=bad_map, iterations=res.iterations, converged=res.converged, n_frames=N, notes=tuple(notes),
    )
