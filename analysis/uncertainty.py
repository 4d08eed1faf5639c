"""Uncertainty budgets of the cloak metrics and of calibrated RCS (GUM, JCGM 100:2008).

A budget is a list of named components, each with its type (A: evaluated from the data; B: from a
stated assumption), its standard uncertainty in dB, the number of samples behind a type-A estimate
and a one-line note; the combined standard uncertainty is their root sum of squares (the components
are independent), the expanded uncertainty is ``coverage_k`` times it (README, The processing chain, step 7).

The random components (noise and floor, drift) are propagated through the chain to first order
(GUM 5.1.2): the chain up to |A|^2 is linear in every sweep (background subtraction, the gate as a
matrix, the calibration), so a metric's change is a linear form in each sweep's noise and in each
sweep's complex gain error, and its variance a quadratic form. The background mean and the
calibration reference enter every target and every angle that used them with one shared error, so
their terms are carried as correlated, as they are in the measurement.

Conventions: sigma in m^2, amplitudes in m, complex gains relative (1 + epsilon), dB = 10 log10 of
power; a sweep's drift epsilon has a real part (relative amplitude) and an imaginary part (phase, rad).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from . import calibrate, metrics, references, timedomain
from .constants import C0

DB = metrics.DB
GATE_SPAN_STEP = 0.10  # the gate term re-gates at span x (1 +/- this) ...
RECT = math.sqrt(3.0)  # a rectangular distribution of half-width a has standard uncertainty a / sqrt(3)


@dataclass(frozen=True)
class Drift:
    """Sweep-to-sweep drift of the complex system gain, pooled over repeated sweeps.

    ``var_re`` and ``var_im`` are the variances of the real part (relative amplitude) and of the
    imaginary part (phase, rad) of one sweep's gain error; ``dof`` the degrees of freedom behind them.
    """

    var_re: float
    var_im: float
    dof: int
    source: str

    @property
    def known(self) -> bool:
        return self.dof > 0


def drift_from_repeats(sweep_sets: dict[str, np.ndarray]) -> Drift:
    """Pool the drift of repeated raw sweeps: {target name: (pol, angle, repeat, nf)}.

    Each repeat's deviation from its group's mean is projected on the mean, epsilon_r =
    sum_f conj(m) (x_r - m) / sum_f |m|^2 (the raw sweeps are dominated by coupling and clutter,
    far above the noise, so epsilon is the gain error of the whole sweep). The variance of the real
    and imaginary parts is sum |epsilon_r|^2 over every group / sum (N - 1) (GUM 4.2.2, pooled).
    """
    s_re = s_im = 0.0
    dof = 0
    names = []
    for name, x in sweep_sets.items():
        n = x.shape[2]
        if n < 2:
            continue
        m = x.mean(axis=2, keepdims=True)
        norm = np.sum(np.abs(m) ** 2, axis=-1)
        eps = np.sum(np.conj(m) * (x - m), axis=-1) / np.maximum(norm, 1e-300)
        s_re += float(np.sum(eps.real ** 2))
        s_im += float(np.sum(eps.imag ** 2))
        dof += (n - 1) * x.shape[0] * x.shape[1]
        names.append(f"{name} ({n} repeats x {x.shape[0] * x.shape[1]} sweep groups)")
    if dof == 0:
        return Drift(0.0, 0.0, 0, "no repeated sweeps")
    return Drift(s_re / dof, s_im / dof, dof, ", ".join(names))


@dataclass
class GatedTarget:
    """What the Monte Carlo needs of one gated, calibrated target."""

    name: str
    pols: list[str]
    g: np.ndarray  # (pol, angle, nf) gated mean of the background-subtracted sweeps
    clutter: np.ndarray | None  # (pol, angle, nf) the gated background mean that was subtracted
    n_rep: int
    background: str | None
    bg_index: np.ndarray | None  # background angle index of each target angle
    center_m: float
    span_m: float
    range_m: float
    factor: np.ndarray  # (pol, nf) calibration factor K


@dataclass
class BackgroundNoise:
    """A background's sweeps as the Monte Carlo draws them: noise std per sweep and repeat count."""

    pols: list[str]
    n_angles: int
    n_rep: int
    noise_std: np.ndarray  # (pol, nf) std of the complex raw noise of one sweep


@dataclass
class ChainModel:
    """The inputs of every Monte Carlo draw (built by :mod:`cloakrcs.process`)."""

    frequency_hz: np.ndarray
    gate: dict  # time_gate keyword arguments
    targets: dict[str, GatedTarget]
    noise_std: dict[str, np.ndarray]  # target name -> (pol, nf) raw noise std of one sweep
    backgrounds: dict[str, BackgroundNoise]
    reference_use: dict[str, list]  # pol -> [(reference name, pol index, angle indices)] averaged
    drift: Drift


@dataclass
class RowContext:
    """One metric row (subject, baseline, polarization) as the metrics are computed from sigma."""

    subject: str
    baseline: str
    pol: str
    ip_s: int
    ip_b: int
    idx: np.ndarray  # baseline angle index for each subject angle
    sector: np.ndarray  # (angle,) bool
    band: np.ndarray  # (nf,) bool, reporting band
    floor_s: np.ndarray  # (nf,) m^2
    floor_b: np.ndarray
    margin_db: float
    angles: np.ndarray
    offset_deg: float | None  # the mounting offset applied (None: not aligned)
    frequency_hz: np.ndarray = None
    cell_hz: float = 0.0  # correlation cell of the noise (an inverse gate duration)
    k: float = 2.0
    nominal: dict = field(default_factory=dict)  # metrics.corrected_reduction of the chain


def row_values(ctx: RowContext, sigma_b, sigma_s, offset_deg: float | None = "nominal") -> dict:
    """Band-averaged reduction, sector curve R(f) and best reduction from sigma (angle, nf), as the chain
    computes them (:func:`cloakrcs.metrics.corrected_reduction`); ``sigma_b`` is at the subject's angles."""
    off = ctx.offset_deg if offset_deg == "nominal" else offset_deg
    if off is not None:
        sigma_s = metrics.resample_angles(ctx.angles, sigma_s, np.asarray(ctx.angles) + off)
    sel = np.ix_(ctx.sector, ctx.band)
    cr = metrics.corrected_reduction(sigma_b[sel], ctx.floor_b[ctx.band], sigma_s[sel], ctx.floor_s[ctx.band],
                                     ctx.frequency_hz[ctx.band], ctx.cell_hz, ctx.k)
    return {"band_reduction_db": cr["band_db"], "sector_curve_db": cr["curve_db"],
            "best_reduction_db": float(np.max(cr["curve_db"]))}


METRICS = ("band_reduction_db", "best_reduction_db", "sector_curve_db")


# ---------------------------------------------------------------- noise and drift, propagated linearly

@dataclass
class _Part:
    """One target's share of a metric: delta metric = DB 2 Re sum_{a, f} V[a, f] delta_g[a, f]."""

    name: str
    ip: int
    v: np.ndarray  # (target angle, nf): derivative of the band average's log (natural) by g
    v_curve: np.ndarray  # (target angle, nf): the same for R(f) at each f
    n2_band: float = 0.0  # variance (log units) from the noise power's own fluctuation, N^2 terms
    n2_curve: np.ndarray | float = 0.0


class NoisePropagation:
    """Noise and drift of the metrics, propagated through the linear chain (GUM 5.1.2, first order).

    Each target's gated mean g is perturbed by its own sweeps' noise (gated: G n), by the background
    mean it had subtracted (G n_bg: one draw shared by every target and every angle that used it) and by
    each sweep's complex gain drift epsilon (g + clutter) - epsilon_bg clutter; the calibration
    reference's relative error e (K' = K / (1 + e)) scales every target alike. A metric's change is
    DB 2 Re sum V delta_g with V its derivative, so its variance is a quadratic form in the noise
    spectra and the drift variances: exact for the linear part, with no random draws.
    """

    def __init__(self, model: "ChainModel"):
        self.model = model
        self._ops: dict[tuple, timedomain.GateOperator] = {}
        self._cross: dict[tuple, np.ndarray] = {}

    def gate_key(self, name: str) -> tuple:
        t = self.model.targets[name]
        return (t.center_m, t.span_m)

    def op(self, name: str) -> timedomain.GateOperator:
        """The target's gate as a linear operator (one per gate, shared by targets gated alike)."""
        key = self.gate_key(name)
        if key not in self._ops:
            t = self.model.targets[name]
            self._ops[key] = timedomain.GateOperator(self.model.frequency_hz, t.center_m, t.span_m, **self.model.gate)
        return self._ops[key]

    def gated_power(self, name: str, s2: np.ndarray) -> np.ndarray:
        """sum_f' |G[f, f']|^2 s2(f'): the gated noise power per frequency of noise of variance s2(f')."""
        return self.op(name).power(s2)

    def cross_power(self, kx: tuple, ky: tuple, s2: np.ndarray, tag) -> np.ndarray:
        """sum_f' G_x[f, f'] conj(G_y[f, f']) s2(f') for two gates (one shared noise draw)."""
        key = (kx, ky, tag)
        if key not in self._cross:
            self._cross[key] = self._ops[kx].cross_power(self._ops[ky], s2)
        return self._cross[key]

    @staticmethod
    def _apply(v: np.ndarray, op: timedomain.GateOperator) -> np.ndarray:
        """v @ G over the rows of v that are not zero (the sector's angles)."""
        return op.apply_transpose(v[np.flatnonzero(np.any(v != 0, axis=1))])

    def _deriv(self, name: str, ip: int) -> np.ndarray:
        """dA/dg (nf,) of a target: K R^2 exp(+j 2 k R)."""
        t = self.model.targets[name]
        return calibrate.calibrated_amplitude(self.model.frequency_hz, t.factor[ip], 1.0, t.range_m)

    def parts(self, ctx: "RowContext") -> list[_Part]:
        """The subject's, the baseline's and the reference's derivatives of the band reduction and of
        R(f): both are ratios of noise-corrected sums, sum (sigma - N) over the sector and the band."""
        m = self.model
        out = []
        q = 0.0
        for role, name, ip, sign in (("b", ctx.baseline, ctx.ip_b, 1.0), ("s", ctx.subject, ctx.ip_s, -1.0)):
            t = m.targets[name]
            c = self._deriv(name, ip)
            amp = c * t.g[ip]
            if role == "b":
                amp = amp[ctx.idx]
            floor = ctx.floor_b if role == "b" else ctx.floor_s
            inside = ctx.sector[:, None] & ctx.band[None, :]
            corrected = np.where(inside, np.abs(amp) ** 2 - floor, 0.0)
            total = corrected.sum()
            total = total if total > 0 else np.inf  # a sum at the floor: its metric is a bound, no derivative
            per_f = corrected.sum(axis=0)
            per_f = np.where(per_f > 0, per_f, np.inf)
            v = sign * np.conj(amp) * c * inside / total
            v_curve = sign * np.conj(amp) * c * inside / per_f
            # second order: the noise power itself fluctuates, var(|s + n|^2) = 2 |s|^2 N + N^2
            nn = np.where(inside, np.broadcast_to(floor, inside.shape), 0.0)
            n2_band = (metrics.sum_noise_u(np.zeros(nn.shape), nn, ctx.frequency_hz, ctx.cell_hz) / total) ** 2
            n2_curve = np.sum(nn ** 2, axis=0) / per_f / per_f
            # the reference's relative error e changes every (sigma - N) by -2 Re(e): its weight per f
            q = q + sign * corrected.sum(axis=0) / total
            if role == "b":  # back onto the baseline's own angles (a baseline angle may serve twice)
                vb = np.zeros(t.g[ip].shape, complex)
                vbc = np.zeros(t.g[ip].shape, complex)
                np.add.at(vb, ctx.idx, v)
                np.add.at(vbc, ctx.idx, v_curve)
                v, v_curve = vb, vbc
            out.append(_Part(name, ip, v, v_curve, n2_band, n2_curve))
        # calibration: at one frequency it scales subject and baseline alike and cancels in R(f); in the
        # band average it is weighted by each spectrum: delta = -DB 2 Re sum_f e(f) q(f)
        uses = m.reference_use[ctx.pol]
        for name, ip, angles in uses:
            t = m.targets[name]
            v = np.zeros(t.g[ip].shape, complex)
            g = t.g[ip, angles]
            v[angles] = -q[None, :] / (len(uses) * len(angles) * np.where(np.abs(g) > 0, g, np.inf))
            out.append(_Part(name, ip, v, np.zeros_like(v), 0.0, 0.0))
        return out

    def noise_u(self, parts: list[_Part]) -> tuple[float, np.ndarray]:
        """Standard uncertainty (dB) of the band reduction and of R(f) (nf,) from the noise of every
        sweep: own noise per target and angle, and the shared background means."""
        m = self.model
        var_band = 0.0
        var_curve = 0.0
        bg_h: dict[str, np.ndarray] = {}
        bg_curve: dict[str, dict] = {}
        bg_pol: dict[str, int] = {}
        for p in parts:
            t = m.targets[p.name]
            op = self.op(p.name)
            s2 = m.noise_std[p.name][p.ip] ** 2 / t.n_rep
            h = self._apply(p.v, op)  # coefficient of each raw noise sample
            var_band += np.sum(np.abs(h) ** 2 * s2)
            pw = self.gated_power(p.name, s2)  # gated noise power of the mean per frequency
            var_curve = var_curve + np.sum(np.abs(p.v_curve) ** 2, axis=0) * pw
            if t.background is not None:
                b = m.backgrounds[t.background]
                j = np.zeros((b.n_angles, len(m.frequency_hz)), complex)
                np.add.at(j, t.bg_index, p.v)
                bg_h[t.background] = bg_h.get(t.background, 0.0) - op.apply_transpose(j)
                jc = np.zeros((b.n_angles, len(m.frequency_hz)), complex)
                np.add.at(jc, t.bg_index, p.v_curve)
                per_gate = bg_curve.setdefault(t.background, {})
                key = self.gate_key(p.name)
                per_gate[key] = per_gate.get(key, 0.0) + jc  # parts behind one gate share G: add first
                bg_pol[t.background] = b.pols.index(t.pols[p.ip])
        for name, h in bg_h.items():
            b = m.backgrounds[name]
            ib = bg_pol[name]
            s2 = b.noise_std[ib] ** 2 / b.n_rep
            var_band += np.sum(np.abs(h) ** 2 * s2)
            terms = bg_curve[name]  # R(f0): sum over f' of |sum_x alpha_x(f0) G_x[f0, f']|^2 s2(f')
            for kx, ax in terms.items():
                for ky, ay in terms.items():
                    cxy = self.cross_power(kx, ky, s2, (name, ib))
                    var_curve = var_curve + np.real(np.sum(ax * np.conj(ay), axis=0) * cxy)
        scale = 2 * DB ** 2  # var(2 Re z) = 2 E|z|^2 for circular complex noise
        second = sum(p.n2_band for p in parts), sum(p.n2_curve for p in parts)
        return (math.sqrt(scale * var_band + DB ** 2 * second[0]),
                np.sqrt(scale * np.maximum(var_curve, 0.0) + DB ** 2 * second[1]))

    def drift_u(self, parts: list[_Part]) -> tuple[float, np.ndarray]:
        """Standard uncertainty (dB) of the band reduction and of R(f) from each sweep's gain drift."""
        m = self.model
        d = m.drift
        var_band, var_curve = 0.0, 0.0
        bg_z: dict[str, tuple] = {}
        for p in parts:
            t = m.targets[p.name]
            clutter = 0.0 if t.clutter is None else t.clutter[p.ip]
            seen = t.g[p.ip] + clutter
            z = np.sum(p.v * seen, axis=-1)  # (angle,): the metric's change per unit epsilon of each sweep
            zc = p.v_curve * seen  # (angle, nf)
            var_band += np.sum(d.var_re * z.real ** 2 + d.var_im * z.imag ** 2) / t.n_rep
            var_curve = var_curve + np.sum(d.var_re * zc.real ** 2 + d.var_im * zc.imag ** 2, axis=0) / t.n_rep
            if t.background is not None and t.clutter is not None:
                b = m.backgrounds[t.background]
                zb = np.zeros(b.n_angles, complex)
                np.add.at(zb, t.bg_index, -np.sum(p.v * clutter, axis=-1))
                zbc = np.zeros((b.n_angles, len(m.frequency_hz)), complex)
                np.add.at(zbc, t.bg_index, -p.v_curve * clutter)
                prev = bg_z.get(t.background, (0.0, 0.0))
                bg_z[t.background] = (prev[0] + zb, prev[1] + zbc)
        for name, (zb, zbc) in bg_z.items():
            n = m.backgrounds[name].n_rep
            var_band += np.sum(d.var_re * np.real(zb) ** 2 + d.var_im * np.imag(zb) ** 2) / n
            var_curve = var_curve + np.sum(d.var_re * np.real(zbc) ** 2 + d.var_im * np.imag(zbc) ** 2, axis=0) / n
        scale = 4 * DB ** 2  # delta = DB 2 Re(epsilon z)
        return math.sqrt(scale * var_band), np.sqrt(scale * var_curve)

    def reference_u(self, pol: str) -> tuple[np.ndarray, np.ndarray]:
        """Standard uncertainty (relative power, per f) of every calibrated sigma from the reference's
        noise and drift: -2 Re(e), e its relative error."""
        m = self.model
        f = m.frequency_hz
        uses = m.reference_use[pol]
        var_n, var_d = np.zeros(len(f)), np.zeros(len(f))
        for name, ip, angles in uses:
            t = m.targets[name]
            w = 1.0 / (len(uses) * len(angles) * t.g[ip, angles])  # (n_used, nf)
            s2 = m.noise_std[name][ip] ** 2 / t.n_rep
            var_n += np.sum(np.abs(w) ** 2, axis=0) * self.gated_power(name, s2)
            seen = t.g[ip, angles] + (0.0 if t.clutter is None else t.clutter[ip, angles])
            z = w * seen
            var_d += np.sum(m.drift.var_re * z.real ** 2 + m.drift.var_im * z.imag ** 2, axis=0) / t.n_rep
            if t.background is not None:
                b = m.backgrounds[t.background]
                a = np.zeros((b.n_angles, len(f)), complex)
                np.add.at(a, t.bg_index[angles], w)
                s2b = b.noise_std[b.pols.index(t.pols[ip])] ** 2 / b.n_rep
                var_n += np.sum(np.abs(a) ** 2, axis=0) * self.gated_power(name, s2b)
                if t.clutter is not None:
                    zb = a * t.clutter[ip, angles].mean(axis=0)
                    var_d += np.sum(m.drift.var_re * zb.real ** 2 + m.drift.var_im * zb.imag ** 2, axis=0) / b.n_rep
        return np.sqrt(2 * var_n), np.sqrt(4 * var_d)


# ---------------------------------------------------------------- type-B terms

def gate_variants(f, span_m: float) -> list[tuple[float, float, str]]:
    """(centre shift m, span factor, label) of the re-gates behind the gate term: span x (1 +/- 10 %)
    and the centre moved by one range cell, c0 / (2 B), either way."""
    cell = C0 / (2 * (f[-1] - f[0]))
    return [(0.0, 1 - GATE_SPAN_STEP, "span -10 %"), (0.0, 1 + GATE_SPAN_STEP, "span +10 %"),
            (-cell, 1.0, f"centre -{1e3 * cell:.1f} mm"), (cell, 1.0, f"centre +{1e3 * cell:.1f} mm")]


def dimension_ratios(shape: dict, tolerances: dict[str, float], f, aspect_deg: float, pol: str) -> dict[str, np.ndarray]:
    """{dimension key: sigma_theory(dim + tol) / sigma_theory(dim) over f} of a reference shape."""
    base = np.abs(references.reference_amplitude(shape, f, np.array([aspect_deg]), pol)[0]) ** 2
    out = {}
    for key, tol in tolerances.items():
        if not tol or key not in shape:
            continue
        moved = dict(shape)
        moved[key] = shape[key] + tol
        out[key] = np.abs(references.reference_amplitude(moved, f, np.array([aspect_deg]), pol)[0]) ** 2 / \
            np.maximum(base, 1e-300)
    return out


# ---------------------------------------------------------------- assembling the budgets

@dataclass
class TypeBInputs:
    """What the type-B terms need besides the Monte Carlo model."""

    regate: object  # regate(name, center_m, span_m) -> (pol, angle, nf) gated mean
    ranges_m: dict[str, float]  # target name -> range (m)
    range_tolerance_m: dict[str, float]  # target name -> range tolerance (m, half-width)
    reference_ratios: dict[str, dict[str, np.ndarray]]  # pol -> {dimension: sigma(dim + tol) / sigma(dim)}
    reference_tolerances: dict[str, dict[str, float]]  # pol -> {dimension: tolerance m}
    reference_range_m: dict[str, float]  # pol -> range of the reference that calibrates it
    angle_step_deg: dict[str, float] = field(default_factory=dict)  # subject -> turntable step
    floor_rel_u: float = 0.5  # relative standard uncertainty of the floor's noise power
    floor_dof: float | None = None  # its degrees of freedom (None: a type-B assumption)
    floor_note: str = ""


def _sigma(model: ChainModel, name: str, ip: int, g=None) -> np.ndarray:
    t = model.targets[name]
    g = t.g[ip] if g is None else g
    return np.abs(calibrate.calibrated_amplitude(model.frequency_hz, t.factor[ip], g, t.range_m)) ** 2


def _u_of(deltas: list[dict], metric: str) -> np.ndarray:
    """Half-width / sqrt(3) of a rectangular distribution spanning the largest deviation seen."""
    return np.max(np.abs(np.stack([d[metric] for d in deltas])), axis=0) / RECT


def _diff(a: dict, b: dict) -> dict:
    return {m: np.asarray(a[m]) - np.asarray(b[m]) for m in METRICS}


def type_b_components(model: ChainModel, ctx: RowContext, inputs: TypeBInputs) -> list[tuple[str, dict, str]]:
    """(component name, {metric: u}, note) of the gate, reference-dimension, range and alignment terms."""
    sb = _sigma(model, ctx.baseline, ctx.ip_b)[ctx.idx]
    ss = _sigma(model, ctx.subject, ctx.ip_s)
    nominal = row_values(ctx, sb, ss)
    out = []
    # gate: re-gate subject and baseline together (the reference keeps its gate)
    deltas, labels = [], []
    tb, ts = model.targets[ctx.baseline], model.targets[ctx.subject]
    for dc, fs, label in gate_variants(model.frequency_hz, ts.span_m):
        try:
            gb = inputs.regate(ctx.baseline, tb.center_m + dc, tb.span_m * fs)[ctx.ip_b]
            gs = inputs.regate(ctx.subject, ts.center_m + dc, ts.span_m * fs)[ctx.ip_s]
        except Exception as exc:  # noqa: BLE001 - a variant the gate checks refuse is left out, and said so
            labels.append(f"{label} refused ({exc})")
            continue
        deltas.append(_diff(row_values(ctx, _sigma(model, ctx.baseline, ctx.ip_b, gb)[ctx.idx],
                                       _sigma(model, ctx.subject, ctx.ip_s, gs)), nominal))
        labels.append(label)
    if deltas:
        out.append(("gate", {m: _u_of(deltas, m) for m in METRICS},
                    "largest change on re-gating subject and baseline (" + ", ".join(labels)
                    + "), as the half-width of a rectangular distribution"))
    # reference dimensions: the calibration scales every target alike, but bare and cloaked spectra
    # weight the frequencies differently, so it cancels in a reduction only where it is flat
    for key, ratio in inputs.reference_ratios.get(ctx.pol, {}).items():
        scaled = RowContext(**{**ctx.__dict__, "floor_s": ctx.floor_s * ratio, "floor_b": ctx.floor_b * ratio})
        d = _diff(row_values(scaled, sb * ratio, ss * ratio), nominal)
        tol = inputs.reference_tolerances[ctx.pol][key]
        out.append((f"reference {key}", {m: np.abs(d[m]) / RECT for m in METRICS},
                    f"reference {key} +/- {tol:g} m (rectangular): the theory's change over the band, "
                    f"{_db_span(ratio)}; in a reduction only its variation across the band is left"))
    # range: sigma scales as R^4 between a target and its reference; it cancels between subject and
    # baseline at the same range
    tol_s, tol_b = inputs.range_tolerance_m.get(ctx.subject, 0.0), inputs.range_tolerance_m.get(ctx.baseline, 0.0)
    if tol_s or tol_b:
        rs, rb = inputs.ranges_m[ctx.subject], inputs.ranges_m[ctx.baseline]
        if abs(rs - rb) > 1e-9:
            u = DB * 4 / RECT * math.hypot(tol_s / rs, tol_b / rb)
            note = f"sigma ~ R^4: 4 x {max(tol_s, tol_b):g} m / R (rectangular), subject at {rs:g} m, baseline at {rb:g} m"
        else:
            u = 0.0
            note = f"subject and baseline at the same range ({rs:g} m): the range tolerance cancels"
        out.append(("range", {m: np.full(np.shape(nominal[m]), u) for m in METRICS}, note))
    # angle alignment and interpolation (--align-angles)
    if ctx.offset_deg is not None:
        step = inputs.angle_step_deg.get(ctx.subject, 0.0)
        deltas = [_diff(row_values(ctx, sb, ss, offset_deg=ctx.offset_deg + s * step / 2), nominal) for s in (-1, 1)]
        out.append(("angle alignment", {m: _u_of(deltas, m) for m in METRICS},
                    f"mounting offset {ctx.offset_deg:+.2f} deg moved by half an angle step ({step / 2:g} deg) "
                    f"either way, linear interpolation between sweeps"))
    return out


def _db_span(ratio) -> str:
    db = 10 * np.log10(np.asarray(ratio))
    return f"{db.min():+.3f} to {db.max():+.3f} dB"


def metric_budgets(model: ChainModel, contexts: list[RowContext], inputs: TypeBInputs, k: float,
                   floor_sweeps: int) -> tuple[list[dict], NoisePropagation]:
    """Budgets of every metric row ({metric: budget}), and the propagation (for the points)."""
    prop = NoisePropagation(model)
    out = []
    for ctx in contexts:
        parts = prop.parts(ctx)
        sb = _sigma(model, ctx.baseline, ctx.ip_b)[ctx.idx]
        ss = _sigma(model, ctx.subject, ctx.ip_s)
        ibest = int(np.argmax(row_values(ctx, sb, ss)["sector_curve_db"]))
        un_band, un_curve = prop.noise_u(parts)
        random = {"noise and floor": {"band_reduction_db": un_band, "sector_curve_db": un_curve,
                                      "best_reduction_db": un_curve[ctx.band][ibest]}}
        if model.drift.known:
            ud_band, ud_curve = prop.drift_u(parts)
            random["drift"] = {"band_reduction_db": ud_band, "sector_curve_db": ud_curve,
                               "best_reduction_db": ud_curve[ctx.band][ibest]}
        per_metric = {m: [] for m in METRICS}
        for m in METRICS:
            pick = (lambda v: v[ctx.band]) if m == "sector_curve_db" else (lambda v: v)
            per_metric[m].append(_component(
                "noise and floor", "A", pick(random["noise and floor"][m]), floor_sweeps,
                "noise of every sweep (subject, baseline, the shared background mean and the calibration "
                f"reference) propagated through the gate as a linear operator; noise level from {floor_sweeps} "
                "repeated sweeps", dof=None))
            if "drift" in random:
                per_metric[m].append(_component(
                    "drift", "A", pick(random["drift"][m]), model.drift.dof,
                    f"a complex gain error on every sweep of every target, rms "
                    f"{DB * math.sqrt(model.drift.var_re):.4f} dB and "
                    f"{math.degrees(math.sqrt(model.drift.var_im)):.3f} deg per sweep from {model.drift.source}",
                    dof=model.drift.dof))
            else:
                per_metric[m].append(_component("drift", "B", 0.0, None,
                                                "not evaluated: no repeated sweeps; measure the background and "
                                                "the reference at least twice to see it"))
        fl = floor_level_u(ctx, inputs.floor_rel_u, ibest)
        for m in METRICS:
            per_metric[m].append(_component(
                "floor level", "A" if inputs.floor_dof else "B", fl[m], None,
                f"the noise power subtracted from every sum is known to {100 * inputs.floor_rel_u:.0f} % "
                f"({inputs.floor_note})", dof=inputs.floor_dof))
        for name, us, note in type_b_components(model, ctx, inputs):
            for m in METRICS:
                per_metric[m].append(_component(name, "B", us[m], None, note))
        out.append({m: combine(per_metric[m], k) for m in METRICS})
    return out, prop


def floor_level_u(ctx: RowContext, rel_u: float, ibest: int) -> dict:
    """Standard uncertainty (dB) of the metrics from the floor's noise power N, subtracted from the
    subject's and the baseline's sums alike: d metric / d ln N times its relative uncertainty."""
    n_ang = int(np.sum(ctx.sector))
    nb, ns = ctx.floor_b[ctx.band] * n_ang, ctx.floor_s[ctx.band] * n_ang
    sums_b = ctx.nominal.get("baseline_curve_sum")
    sums_s = ctx.nominal.get("subject_curve_sum")
    pos = lambda x: x if x > 0 else math.inf  # noqa: E731 - a sum at the floor: a bound, no derivative
    band = DB * rel_u * abs(-nb.sum() / pos(ctx.nominal["baseline_sum"]) + ns.sum() / pos(ctx.nominal["subject_sum"]))
    curve = DB * rel_u * np.abs(-nb / np.where(sums_b > 0, sums_b, np.inf) + ns / np.where(sums_s > 0, sums_s, np.inf))
    return {"band_reduction_db": band, "sector_curve_db": curve, "best_reduction_db": float(curve[ibest])}


def _component(name: str, kind: str, u, samples, note: str, dof=None) -> dict:
    """One budget line; a per-frequency u (the sector curve) is summarised by its largest value."""
    arr = np.asarray(u, float)
    c = {"component": name, "type": kind, "u_db": float(np.max(arr)) if arr.size else 0.0,
         "samples": samples, "note": note, "dof": dof}
    if arr.ndim == 1:
        c["u_db_per_frequency"] = [float(x) for x in arr]
    return c


def combine(components: list[dict], k: float) -> dict:
    """The budget of one metric: components, combined and expanded uncertainty, effective degrees of
    freedom (Welch-Satterthwaite, GUM G.4.1; type-B terms taken with infinite degrees of freedom).
    A per-frequency budget (the sector curve) also gets ``combined_u_db_per_frequency``."""
    u = [c["u_db"] for c in components]
    uc = math.sqrt(sum(x * x for x in u))
    den = sum(c["u_db"] ** 4 / c["dof"] for c in components if c.get("dof") and c["u_db"] > 0)
    out = {"components": components, "combined_u_db": uc, "coverage_k": k, "expanded_u_db": k * uc,
           "effective_dof": None if den == 0 else uc ** 4 / den}
    per_f = [c["u_db_per_frequency"] for c in components if "u_db_per_frequency" in c]
    if per_f:
        ucf = np.sqrt(np.sum(np.square(per_f), axis=0))
        out["combined_u_db_per_frequency"] = [float(x) for x in ucf]
        out["expanded_u_db_per_frequency"] = [float(k * x) for x in ucf]
    return out


# ---------------------------------------------------------------- per point of calibrated RCS

def point_terms(prop: NoisePropagation, inputs: TypeBInputs, k: float) -> dict:
    """JSON-ready terms behind u_rcs_db, per target: the calibrated RCS of one point has the noise and
    floor term sqrt(2 floor / sigma) (relative power), the target's drift 2 sqrt(var_re / N), the
    reference's relative error (noise and drift), the reference dimensions and the range (dB)."""
    model = prop.model
    out = {"coverage_k": k, "targets": {}}
    f = model.frequency_hz
    ref = {p: np.hypot(*prop.reference_u(p)) for p in model.reference_use}
    for name, t in model.targets.items():
        ref_u, dims = [], []
        for p in t.pols:
            ref_u.append([float(x) for x in ref.get(p, np.zeros(len(f)))])
            ratios = inputs.reference_ratios.get(p, {})
            d = np.sqrt(sum((10 * np.log10(r) / RECT) ** 2 for r in ratios.values())) if ratios else np.zeros(len(f))
            dims.append([float(x) for x in np.broadcast_to(d, f.shape)])
        tol = inputs.range_tolerance_m.get(name, 0.0)
        rr = [inputs.reference_range_m.get(p) for p in t.pols]
        differs = any(r is not None and abs(r - t.range_m) > 1e-9 for r in rr)
        out["targets"][name] = {
            "polarizations": list(t.pols),
            "drift_rel_power_var": 4 * model.drift.var_re / t.n_rep,
            "reference_rel_power_u": ref_u, "reference_dimensions_u_db": dims,
            "range_u_db": DB * 4 * tol / (t.range_m * RECT) if differs else 0.0}
    return out


def point_u_db(sigma, floor, terms: dict | None, ip: int, k: float, select=slice(None)) -> np.ndarray:
    """Expanded uncertainty (dB) of calibrated RCS points sigma (angle, nf') with floor (nf',), from
    :func:`point_terms` (whose arrays cover the whole sweep: ``select`` picks the nf' frequencies);
    NaN when the run has none (processed before budgets existed)."""
    sigma = np.asarray(sigma, float)
    if not terms or terms.get("polarizations") is None or ip >= len(terms["polarizations"]):
        return np.full(sigma.shape, np.nan)
    ref = np.asarray(terms["reference_rel_power_u"][ip])[select]
    dims = np.asarray(terms["reference_dimensions_u_db"][ip])[select]
    rel2 = 2 * np.asarray(floor) / np.maximum(sigma, 1e-300) + terms["drift_rel_power_var"] + ref ** 2
    return k * np.sqrt(DB ** 2 * rel2 + dims ** 2 + terms["range_u_db"] ** 2)


# ---------------------------------------------------------------- presentation (report, dashboard, CLI)

METRIC_LABELS = {"band_reduction_db": "band-averaged reduction", "best_reduction_db": "best reduction",
                 "sector_curve_db": "sector curve R(f), largest over the band"}


def budget_rows(budget: dict) -> list[list[str]]:
    """A budget as text rows: component, type, u (dB), samples / degrees of freedom, note; then the
    combined and the expanded uncertainty (the layout of a calibration certificate's budget)."""
    rows = []
    for c in budget["components"]:
        basis = "-" if c.get("samples") is None else str(c["samples"])
        if c.get("dof"):
            basis += f" (nu = {c['dof']:.0f})"
        rows.append([c["component"], c["type"], f"{c['u_db']:.4f}", basis, c["note"]])
    dof = budget.get("effective_dof")
    rows.append(["combined standard uncertainty", "", f"{budget['combined_u_db']:.4f}",
                 "-" if dof is None else f"nu_eff = {dof:.0f}", "root sum of squares of the components"])
    rows.append([f"expanded uncertainty (k = {budget['coverage_k']:g})", "", f"{budget['expanded_u_db']:.4f}", "",
                 "coverage factor times the combined standard uncertainty"])
    return rows


BUDGET_HEADER = ["component", "type", "u (dB)", "samples", "how it was obtained"]
