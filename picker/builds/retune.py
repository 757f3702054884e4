"""Retune from a measurement: what explains a built board's frequency, and what to change.

Pure: numpy/scipy and the engine in, numbers out; nothing here touches the store.

The fit
-------
Unknowns, per measured board ``b``: the relative deviation ``d[b, r]`` of every tank part
``r`` (``TANK_REFS``: L1, C1, C2, and C3 of a Clapp; L1, L2, C1 of a Hartley) from its
nominal value; shared by all boards of the build: the stray capacitance per node
``stray_f`` (what the build style stands for, the engine adds it from every node to
ground).  Priors, all Gaussian:

- ``d[b, r] ~ N(0, (tol_r / sqrt 3)^2)``: the standard deviation of a part drawn uniformly
  inside its tolerance band (the Monte Carlo's assumption, ``picker.search.montecarlo``);
- ``stray_f ~ N(s0, sd0^2)`` with ``s0`` the style's stray (``style_stray_f``) and ``sd0 =
  max(STRAY_PRIOR_FRACTION * s0, STRAY_PRIOR_FLOOR_F)``;
- each measured frequency has a relative standard uncertainty ``MEAS_REL_SIGMA``, widened by
  what the fit does not vary (the other parts inside their tolerances, hFE over its range:
  ``FreqModel.unmodelled_sd``, linearised).

The model is the engine's (:func:`picker.circuit.engine.small_signal`, the phase-zero
frequency found locally, scaled by the nominal design's running/loop ratio as the Monte
Carlo does).  :func:`fit` minimises the whitened residuals (priors and ``ln f_model - ln
f_measured`` over the measurement uncertainty) with ``scipy.optimize.least_squares``; the
Jacobian is finite differences, every column of every board in one engine batch.  The
posterior covariance is ``(J^T J)^-1`` at the optimum (Laplace approximation), so the
reported standard deviations are those of a linearised Gaussian posterior; the
``*_ci95`` figures are 1.96 of them.

Several boards share the stray, so their mean offset (systematic) separates from the part
spread (board to board): :class:`Fit` reports both, beside what the tolerances alone
would give (the prior predictive spread).

Suggestions
-----------
:func:`suggest` tries, with the stock lines given (available parts), every swap of one
tank part, every small parallel capacitor (at most ``PARALLEL_MAX_FRACTION`` of the
position's value) across a tank capacitor, and for a Clapp every series capacitor C3;
predicts the new frequency of the fitted board (its fitted deviations, the new part
nominal) and its uncertainty (posterior covariance plus the new part's own tolerance,
linearised); and re-checks the best ones by :func:`picker.circuit.evaluate.check_designs`
(hFE and temperature corners) at the fitted stray, keeping those whose worst-case margin
meets the build's minimum.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

from picker.circuit.design import Design, DesignBatch, PartInfo, style_stray_f
from picker.circuit.engine import evaluate_batch, small_signal
from picker.circuit.evaluate import check_designs

#: Tank positions per topology (the frequency-setting parts; the same as the search's).
TANK_REFS = {"colpitts-ce": ("L1", "C1", "C2"), "clapp": ("L1", "C1", "C2", "C3"),
             "hartley": ("L1", "L2", "C1"), "colpitts-cb": ("L1", "C1", "C2")}
#: Relative standard uncertainty of a measured frequency: a scope's or a cheap counter's
#: reading of a free-running oscillator (common practice, no source).
MEAS_REL_SIGMA = 1e-3
#: Prior standard deviation of the stray as a fraction of the style's stray, and its floor
#: (common practice, no source: the style's figure is a rough one, good to about half).
STRAY_PRIOR_FRACTION = 0.5
STRAY_PRIOR_FLOOR_F = 1e-12
#: Tolerance assumed for a tank part whose store line says none (as the Monte Carlo).
UNKNOWN_TOL = 0.10
#: Offset, in standard deviations of the prior prediction, still counted as explained by
#: the tolerances and the style (about 95 % of boards fall inside, Gaussian).
EXPLAINED_Z = 2.0
#: Largest parallel capacitor tried, as a fraction of the position's value ("small").
PARALLEL_MAX_FRACTION = 0.5
#: Finite-difference step of the Jacobian, in prior standard deviations.
FD_STEP = 1e-2
#: Suggestions re-checked in full (worst-case margin) per call.
CHECK_MAX = 16
#: Default worst-case margin a change must keep (``picker find --min-margin``'s default).
DEFAULT_MIN_MARGIN = 2.5


# ---- the model --------------------------------------------------------------------------


class FreqModel:
    """The engine's running frequency of ``design`` as a function of its tank values and stray.

    :meth:`freq_hz` takes arrays (one row per variant) and evaluates all rows in one
    batch.  The phase-zero search starts from the nominal loop frequency scaled by each
    row's change of ideal resonance (as ``picker.search.montecarlo.run``).
    """

    def __init__(self, design: Design):
        self.design = design
        self.base = DesignBatch.from_designs([design])
        nom = evaluate_batch(self.base)
        self.f_loop0 = float(nom.freq_loop_hz[0])
        f_run = float(nom.freq_hz[0])
        if not (np.isfinite(self.f_loop0) and self.f_loop0 > 0):
            raise ValueError("the design does not oscillate in the engine (no phase-zero frequency)")
        self.ratio = f_run / self.f_loop0 if np.isfinite(f_run) and f_run > 0 else 1.0
        self.f_run0 = self.f_loop0 * self.ratio
        self.f_ideal0 = float(nom.freq_ideal_hz[0])
        self.stray0_f = design.node_stray_f
        self.unmodelled_sd = self._unmodelled_sd()

    def _unmodelled_sd(self) -> float:
        """Standard deviation of ln f from what the fit does not vary: the other parts inside their
        tolerance bands (uniform: tol / sqrt 3) and hFE log-uniform over the profile's range,
        linearised (one engine batch of finite differences)."""
        d = self.design
        tank = set(tank_refs(d))
        refs = [p.ref for p in d.topo.positions
                if p.ref in self.base.values and p.ref not in tank and p.kind in ("resistor", "capacitor", "inductor")
                and float(self.base.values[p.ref][0]) > 0]
        h = 1e-3
        n = len(refs) + 2
        b = self.base.take(np.zeros(n, dtype=int))
        vals = {r: v.copy() for r, v in b.values.items()}
        for k, r in enumerate(refs):
            vals[r][k + 1] *= 1 + h
        hfe = b.hfe.copy()
        hfe[-1] *= 1 + h
        b = b.with_(values=vals, hfe=hfe)
        ss = small_signal(b, np.full(n, 2 * np.pi * self.f_loop0))
        g = np.nan_to_num((np.log(ss.freq_loop_hz[1:]) - np.log(ss.freq_loop_hz[0])) / h)
        sd = np.array([part_tol(d, r) for r in refs] + [0.0]) / np.sqrt(3.0)
        sd[-1] = np.log(d.npn.hfe_max / d.npn.hfe_min) / np.sqrt(12.0)
        return float(np.sqrt(np.sum((g * sd) ** 2)))

    def batch(self, values: dict, stray_f) -> DesignBatch:
        """The design with ``values`` (designator -> array, others nominal) and ``stray_f`` per row."""
        stray = np.atleast_1d(np.asarray(stray_f, dtype=float))
        n = max([stray.size] + [np.size(v) for v in values.values()])
        b = self.base.take(np.zeros(n, dtype=int))
        vals = dict(b.values)
        for r, v in values.items():
            vals[r] = np.broadcast_to(np.asarray(v, dtype=float), (n,)).copy()
        return b.with_(values=vals, stray_f=np.broadcast_to(stray, (n,)).copy())

    def freq_hz(self, values: dict, stray_f) -> np.ndarray:
        """Running frequency per row (NaN where the engine finds no phase zero)."""
        b = self.batch(values, stray_f)
        hand = b.topology.hand(b.values, np.ones(b.n), np.ones(b.n))
        guess = 2 * np.pi * self.f_loop0 * hand.freq_ideal_hz / self.f_ideal0
        ss = small_signal(b, guess)
        f = ss.freq_loop_hz * self.ratio
        # rows whose ideal resonance moved far: the local window may miss; retry globally
        bad = ~np.isfinite(f)
        if bad.any():
            ss2 = small_signal(b.take(np.flatnonzero(bad)))
            f[bad] = ss2.freq_loop_hz * self.ratio
        return f


def tank_refs(design: Design) -> tuple[str, ...]:
    return tuple(r for r in TANK_REFS[design.topology] if (design.values.get(r) or 0) > 0)


def part_tol(design: Design, ref: str) -> float:
    info = design.parts.get(ref)
    return float(info.tolerance) if info is not None and info.tolerance else UNKNOWN_TOL


def stray_prior(design: Design) -> tuple[float, float]:
    """(mean, standard deviation) of the stray per node before any measurement, farad."""
    s0 = design.node_stray_f
    return s0, max(STRAY_PRIOR_FRACTION * s0, STRAY_PRIOR_FLOOR_F)


# ---- the fit ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Fit:
    """The posterior of one build's measured boards (SI units; deviations are fractions)."""

    refs: tuple                 # tank positions fitted
    boards: tuple               # board numbers, in the order of the arrays
    measured_hz: np.ndarray     # (B,)
    predicted_hz: float         # engine, nominal parts, the style's stray (the build's prediction)
    fitted_hz: np.ndarray       # (B,) the model at the posterior mean
    stray_f: float
    stray_sd_f: float
    stray_prior_f: float
    stray_prior_sd_f: float
    deviation: np.ndarray       # (B, P) posterior mean of each board's part deviations
    deviation_sd: np.ndarray    # (B, P)
    prior_sd: np.ndarray        # (P,) tolerance / sqrt 3
    offset: float               # mean ln(measured / predicted)
    offset_sd_prior: float      # its standard deviation expected from tolerances, style and measurement
    systematic: float           # ln f shift explained by the fitted stray (nominal parts)
    systematic_sd: float
    spread: float               # board-to-board standard deviation of ln f (measured; 0 for one board)
    spread_expected: float      # expected from part tolerances alone
    x: np.ndarray               # whitened posterior mean (B*P + 1,)
    cov: np.ndarray             # whitened posterior covariance
    cost: float
    nfev: int

    @property
    def n_boards(self) -> int:
        return len(self.boards)

    @property
    def stray_ci95_f(self) -> float:
        return 1.96 * self.stray_sd_f

    @property
    def explained(self) -> bool:
        """The mean offset is within what tolerances and the style explain (``EXPLAINED_Z``)."""
        return abs(self.offset) <= EXPLAINED_Z * self.offset_sd_prior

    def as_json(self) -> dict:
        return {
            "boards": [int(b) for b in self.boards], "measured_hz": [float(f) for f in self.measured_hz],
            "predicted_hz": self.predicted_hz, "fitted_hz": [float(f) for f in self.fitted_hz],
            "offset": float(np.expm1(self.offset)), "offset_sd_prior": self.offset_sd_prior,
            "explained_by_tolerances": self.explained,
            "stray_f": self.stray_f, "stray_sd_f": self.stray_sd_f, "stray_ci95_f": self.stray_ci95_f,
            "stray_prior_f": self.stray_prior_f, "stray_prior_sd_f": self.stray_prior_sd_f,
            "systematic": float(np.expm1(self.systematic)), "systematic_sd": self.systematic_sd,
            "spread": self.spread, "spread_expected": self.spread_expected,
            "parts": {r: {"deviation": [float(v) for v in self.deviation[:, k]],
                          "deviation_sd": [float(v) for v in self.deviation_sd[:, k]],
                          "prior_sd": float(self.prior_sd[k])} for k, r in enumerate(self.refs)},
        }  # fmt: skip


class _Problem:
    """Whitened parameters x = [z (B x P, row-major), zs]; d = sd * z, stray = s0 + sd0 * zs."""

    def __init__(self, model: FreqModel, measured_hz: np.ndarray, meas_sigma: float):
        d = model.design
        self.model = model
        self.refs = tank_refs(d)
        self.nominal = np.array([d.values[r] for r in self.refs])
        self.sd = np.array([part_tol(d, r) for r in self.refs]) / np.sqrt(3.0)
        self.s0, self.sd0 = stray_prior(d)
        self.y = np.log(measured_hz)
        self.meas_sigma = meas_sigma
        self.B, self.P = measured_hz.size, len(self.refs)
        self._cache: dict = {}

    def unpack(self, x):
        z = x[: self.B * self.P].reshape(self.B, self.P)
        return self.sd * z, self.s0 + self.sd0 * x[-1]

    def logf(self, dev: np.ndarray, stray: np.ndarray) -> np.ndarray:
        """ln f for rows of deviations (n, P) and strays (n,)."""
        vals = {r: self.nominal[k] * (1 + dev[:, k]) for k, r in enumerate(self.refs)}
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.log(self.model.freq_hz(vals, stray))

    def fun(self, x):
        dev, s = self.unpack(x)
        lf = self.logf(dev, np.full(self.B, s))
        bad = ~np.isfinite(lf)
        lf = np.where(bad, self.y + 50 * self.meas_sigma, lf)  # no oscillation: a large, finite miss
        return np.concatenate([x, (lf - self.y) / self.meas_sigma])

    def jac(self, x):
        dev, s = self.unpack(x)
        B, P, h = self.B, self.P, FD_STEP
        devs = [dev] + [dev + h * self.sd[k] * np.eye(P)[k] for k in range(P)] + [dev]
        strays = [np.full(B, s)] * (P + 1) + [np.full(B, s + h * self.sd0)]
        lf = self.logf(np.concatenate(devs), np.concatenate(strays)).reshape(P + 2, B)
        g = (lf[1:] - lf[0]) / h / self.meas_sigma  # (P+1, B): d residual_b / d z_{b,k} and / d zs
        g = np.nan_to_num(g)
        n = B * P + 1
        j = np.zeros((n + B, n))
        j[:n, :n] = np.eye(n)
        for k in range(P):
            j[n + np.arange(B), np.arange(B) * P + k] = g[k]
        j[n:, -1] = g[P]
        return j


def fit(design: Design, measured_hz, boards=None, meas_sigma: float = MEAS_REL_SIGMA,
        model: FreqModel | None = None) -> Fit:
    """Fit the tank deviations of each measured board and the shared stray (module docstring).

    ``measured_hz``: one frequency per board (the boards' numbers in ``boards``, default 1..B).
    """
    meas = np.atleast_1d(np.asarray(measured_hz, dtype=float))
    if meas.size == 0 or not np.all(np.isfinite(meas) & (meas > 0)):
        raise ValueError("measured frequencies must be positive numbers")
    model = model or FreqModel(design)
    meas_sigma = float(np.hypot(meas_sigma, model.unmodelled_sd))
    pb = _Problem(model, meas, meas_sigma)
    n = pb.B * pb.P + 1
    lo = np.full(n, -np.inf)
    lo[-1] = -pb.s0 / pb.sd0  # stray >= 0: a negative capacitance to ground is not a board
    x0 = np.zeros(n)
    if x0[-1] <= lo[-1]:
        x0[-1] = lo[-1] + 1e-6
    res = optimize.least_squares(pb.fun, x0, jac=pb.jac, bounds=(lo, np.full(n, np.inf)), method="trf",
                                 x_scale=1.0, xtol=1e-10, ftol=1e-10, max_nfev=100)
    x = res.x
    j = pb.jac(x)
    cov = np.linalg.pinv(j.T @ j)
    sd_x = np.sqrt(np.clip(np.diag(cov), 0, None))
    dev, s = pb.unpack(x)
    fitted = np.exp(pb.logf(dev, np.full(pb.B, s)))

    # prior predictive spread and the systematic shift: gradients at nominal parts
    g0 = _grad_nominal(pb, pb.s0)  # (P+1,) d ln f / d z at the prior mean
    gs = _grad_nominal(pb, s)
    lf_nom_prior = float(pb.logf(np.zeros((1, pb.P)), np.array([pb.s0]))[0])
    lf_nom_fit = float(pb.logf(np.zeros((1, pb.P)), np.array([s]))[0])
    parts_var = float(np.sum(g0[:-1] ** 2))
    offset_sd = float(np.sqrt(parts_var / pb.B + g0[-1] ** 2 + meas_sigma**2 / pb.B))
    spread = float(np.std(pb.y, ddof=1)) if pb.B > 1 else 0.0
    return Fit(
        refs=pb.refs, boards=tuple(boards) if boards is not None else tuple(range(1, pb.B + 1)),
        measured_hz=meas, predicted_hz=float(np.exp(lf_nom_prior)), fitted_hz=fitted,
        stray_f=float(s), stray_sd_f=float(pb.sd0 * sd_x[-1]), stray_prior_f=pb.s0, stray_prior_sd_f=pb.sd0,
        deviation=dev, deviation_sd=(pb.sd * sd_x[:-1].reshape(pb.B, pb.P)), prior_sd=pb.sd,
        offset=float(np.mean(pb.y) - lf_nom_prior), offset_sd_prior=offset_sd,
        systematic=lf_nom_fit - lf_nom_prior, systematic_sd=float(abs(gs[-1]) * sd_x[-1]),
        spread=spread, spread_expected=float(np.sqrt(parts_var + meas_sigma**2)),
        x=x, cov=cov, cost=float(res.cost), nfev=int(res.nfev),
    )  # fmt: skip


def _grad_nominal(pb: _Problem, stray: float) -> np.ndarray:
    """d ln f / d (whitened parameter) for one board at nominal parts and ``stray``: (P+1,)."""
    P, h = pb.P, FD_STEP
    dev = np.vstack([np.zeros(P)] + [h * pb.sd[k] * np.eye(P)[k] for k in range(P)] + [np.zeros(P)])
    st = np.full(P + 2, stray)
    st[-1] = stray + h * pb.sd0
    lf = pb.logf(dev, st)
    return np.nan_to_num((lf[1:] - lf[0]) / h)


# ---- suggestions ------------------------------------------------------------------------


@dataclass(frozen=True)
class Change:
    """One correction: what to do, the predicted result and whether it keeps the margin."""

    action: str                 # "swap", "parallel", "series-c3"
    ref: str                    # the position changed
    old_value: float
    new_value: float            # the new part's value (swap) or the added capacitor's (parallel)
    part_id: int | None
    bin: str | None
    tolerance: float
    freq_hz: float              # predicted for the fitted board after the change
    freq_sd_hz: float
    freq_error: float           # signed, against the target
    dcr_ohm: float = 0.0
    margin: float | None = None
    margin_worst: float | None = None
    meets_margin: bool | None = None
    warnings: tuple = ()

    def describe(self) -> str:
        from picker.units import format_value

        kind = "inductor" if self.ref.startswith("L") else "capacitor"
        new = format_value(self.new_value, kind)
        where = f" (part {self.part_id}, bin {self.bin})" if self.part_id is not None else ""
        if self.action == "parallel":
            return f"add {new}{where} across {self.ref} ({format_value(self.old_value, kind)})"
        what = "change the series capacitor" if self.action == "series-c3" else "swap"
        return f"{what} {self.ref} {format_value(self.old_value, kind)} -> {new}{where}"

    def as_json(self) -> dict:
        return {"action": self.action, "ref": self.ref, "old_value": self.old_value, "new_value": self.new_value,
                "part_id": self.part_id, "bin": self.bin, "tolerance": self.tolerance, "freq_hz": self.freq_hz,
                "freq_sd_hz": self.freq_sd_hz, "freq_error": self.freq_error, "margin": self.margin,
                "margin_worst": self.margin_worst, "meets_margin": self.meets_margin,
                "warnings": list(self.warnings), "text": self.describe()}


@dataclass(frozen=True)
class Stock:
    """Available tank-grade lines (arrays; one entry per line): kind, value, tolerance, id, bin."""

    kind: np.ndarray     # object: "capacitor" / "inductor"
    value: np.ndarray
    tol: np.ndarray
    part_id: np.ndarray
    bin: np.ndarray      # object
    qty: np.ndarray
    dcr_ohm: np.ndarray  # inductors' DC resistance (0 unknown)


@dataclass(frozen=True)
class Suggestions:
    target_hz: float
    tol: float
    min_margin: float
    board: int | None            # the board corrected; None = a typical board of the build
    warranted: bool              # False: on target already (or within what tolerances explain)
    reason: str
    changes: tuple = ()          # best first, every one meeting the margin
    rejected_margin: int = 0     # candidates in tolerance dropped for the margin
    tried: int = 0

    def as_json(self) -> dict:
        return {"target_hz": self.target_hz, "tol": self.tol, "min_margin": self.min_margin, "board": self.board,
                "change_warranted": self.warranted, "reason": self.reason,
                "changes": [c.as_json() for c in self.changes], "rejected_for_margin": self.rejected_margin,
                "candidates_tried": self.tried}


def _board_state(ft: Fit, board: int | None):
    """Whitened mean and covariance of (this board's P deviations, stray); a typical board
    (``board`` None) has the prior for its parts and the posterior for the stray."""
    P = len(ft.refs)
    if board is None:
        mean = np.zeros(P + 1)
        mean[-1] = ft.x[-1]
        cov = np.eye(P + 1)
        cov[-1, -1] = ft.cov[-1, -1]
        return mean, cov
    b = ft.boards.index(board)
    idx = np.r_[np.arange(b * P, (b + 1) * P), ft.x.size - 1]
    return ft.x[idx], ft.cov[np.ix_(idx, idx)]


def _candidates(design: Design, stock: Stock, refs):
    """(action, ref, new_value, line index) for every change the stock allows."""
    out = []
    for ref in refs:
        kind = "inductor" if design.topo.position(ref).kind == "inductor" else "capacitor"
        old = design.values[ref]
        of_kind = np.flatnonzero(stock.kind == kind)
        for i in of_kind:
            v = float(stock.value[i])
            if not np.isclose(v, old, rtol=1e-6):
                action = "series-c3" if (design.topology == "clapp" and ref == "C3") else "swap"
                out.append((action, ref, v, int(i)))
            if kind == "capacitor" and v <= PARALLEL_MAX_FRACTION * old:
                out.append(("parallel", ref, v, int(i)))
    return out


def suggest(design: Design, ft: Fit, stock: Stock, target_hz: float, tol: float,
            min_margin: float = DEFAULT_MIN_MARGIN, board: int | None = None,
            temps_c: tuple = (0.0, 50.0), model: FreqModel | None = None, top: int = 5) -> Suggestions:
    """Changes that bring the fitted board (or a typical board) to the target, best first."""
    model = model or FreqModel(design)
    f_now = float(np.exp(np.mean(np.log(ft.measured_hz)))) if board is None else \
        float(ft.measured_hz[ft.boards.index(board)])
    err_now = f_now / target_hz - 1
    if abs(err_now) <= tol:
        return Suggestions(target_hz, tol, min_margin, board, False,
                           f"the measured frequency is {err_now:+.2%} from the target, inside its ±{tol:.2%}: "
                           "no change warranted")
    refs = ft.refs
    P = len(refs)
    sd = ft.prior_sd
    nominal = np.array([design.values[r] for r in refs])
    mean, cov = _board_state(ft, board)
    dev = sd * mean[:P]
    stray = ft.stray_prior_f + ft.stray_prior_sd_f * mean[-1]
    cands = _candidates(design, stock, refs)
    if not cands:
        return Suggestions(target_hz, tol, min_margin, board, True,
                           "no tank-grade capacitor or inductor available to change", tried=0)
    n = len(cands)
    fitted = nominal * (1 + dev)
    vals = {r: np.full(n, fitted[k]) for k, r in enumerate(refs)}
    for c, (action, ref, v, _i) in enumerate(cands):
        vals[ref][c] = v if action != "parallel" else fitted[refs.index(ref)] + v
    f = model.freq_hz(vals, np.full(n, stray))
    err = f / target_hz - 1
    order = np.argsort(np.where(np.isfinite(err), np.abs(err), np.inf), kind="stable")
    keep = [int(c) for c in order[: 4 * CHECK_MAX] if np.isfinite(err[c]) and abs(err[c]) <= 3 * tol]
    if not keep:
        best = int(order[0])
        near = f"{err[best]:+.1%}" if np.isfinite(err[best]) else "none oscillates"
        return Suggestions(target_hz, tol, min_margin, board, True,
                           f"no single change with the parts on hand lands near the target (nearest {near})",
                           tried=n)

    # uncertainty: linearised over (board's deviations, stray, the new part's own deviation)
    K, h = len(keep), FD_STEP
    rows_vals = {r: [] for r in refs}
    rows_stray = []
    for c in keep:
        action, ref, v, i = cands[c]
        new_sd = float(stock.tol[i]) / np.sqrt(3.0)
        for j in range(P + 2):  # 0: base, 1..P: parts, P+1: stray, (P+2 below: new part)
            z = mean.copy()
            if 1 <= j <= P:
                z[j - 1] += h
            elif j == P + 1:
                z[-1] += h
            fv = nominal * (1 + sd * z[:P])
            for k, r in enumerate(refs):
                rows_vals[r].append(fv[k])
            k_ref = refs.index(ref)
            if action == "parallel":
                rows_vals[ref][-1] = fv[k_ref] + v
            else:
                rows_vals[ref][-1] = v
            rows_stray.append(ft.stray_prior_f + ft.stray_prior_sd_f * z[-1])
        # the new part's deviation
        fv = nominal * (1 + sd * mean[:P])
        for k, r in enumerate(refs):
            rows_vals[r].append(fv[k])
        rows_vals[ref][-1] = (fv[refs.index(ref)] + v * (1 + h * new_sd)) if action == "parallel" \
            else v * (1 + h * new_sd)
        rows_stray.append(stray)
    lf = np.log(model.freq_hz({r: np.array(a) for r, a in rows_vals.items()}, np.array(rows_stray)))
    lf = lf.reshape(K, P + 3)
    grads = np.nan_to_num((lf[:, 1:] - lf[:, :1]) / h)  # (K, P+2)
    changes = []
    for k, c in enumerate(keep):
        action, ref, v, i = cands[c]
        g = grads[k]
        g_state = g[: P + 1].copy()
        if action != "parallel":
            g_state[refs.index(ref)] = 0.0  # the old part is gone
        var = float(g_state @ cov @ g_state + g[P + 1] ** 2)
        fk = float(np.exp(lf[k, 0]))
        changes.append(Change(action=action, ref=ref, old_value=float(design.values[ref]), new_value=v,
                              part_id=int(stock.part_id[i]), bin=str(stock.bin[i]), tolerance=float(stock.tol[i]),
                              dcr_ohm=float(stock.dcr_ohm[i]) if action != "parallel" else 0.0,
                              freq_hz=fk, freq_sd_hz=fk * np.sqrt(var), freq_error=fk / target_hz - 1))
    # rank: inside the tolerance first, then a parallel addition before a swap (no desoldering),
    # then the error; then the full check of the best for the margin
    changes.sort(key=lambda ch: (abs(ch.freq_error) > tol, ch.action != "parallel", abs(ch.freq_error)))
    checked = _check_margins(design, changes[:CHECK_MAX], dev, refs, stray, temps_c, min_margin)
    good = [c for c in checked if c.meets_margin]
    rejected = sum(1 for c in checked if not c.meets_margin and abs(c.freq_error) <= tol)
    reason = (f"measured {err_now:+.2%} from the target (tolerance ±{tol:.2%})"
              + ("" if not ft.explained else "; the offset is within what the part tolerances and the build "
                 "style explain"))
    return Suggestions(target_hz, tol, min_margin, board, True, reason, tuple(good[:top]), rejected, n)


def _check_margins(design, changes, dev, refs, stray, temps_c, min_margin):
    if not changes:
        return []
    designs = []
    for ch in changes:
        vals = dict(design.values)
        for k, r in enumerate(refs):
            vals[r] = design.values[r] * (1 + dev[k])
        vals[ch.ref] = vals[ch.ref] + ch.new_value if ch.action == "parallel" else ch.new_value
        parts = dict(design.parts)
        if ch.action != "parallel":
            parts[ch.ref] = PartInfo(part_id=ch.part_id, tolerance=ch.tolerance, bin=ch.bin,
                                     dcr_ohm=ch.dcr_ohm or None)
        designs.append(Design(topology=design.topology, values=vals, npn=design.npn, vcc_v=design.vcc_v,
                              temp_c=design.temp_c, style=design.style, stray_f=stray, parts=parts))
    evs = check_designs(designs, tuple(temps_c))
    from dataclasses import replace

    out = []
    for ch, ev in zip(changes, evs):
        ok = bool(np.isfinite(ev.margin_worst) and ev.margin_worst >= min_margin)
        out.append(replace(ch, margin=float(ev.margin), margin_worst=float(ev.margin_worst), meets_margin=ok,
                           warnings=tuple(w.code for w in ev.warnings)))
    return out
