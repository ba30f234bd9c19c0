"""Relative critical resolved shear stresses by maximum likelihood (the model: ``docs/statistics.md``).

Model. In grain ``g`` every candidate system ``s`` has a drive ``x_gs`` (its Schmid factor under
an axis load, or its resolved shear stress under a stress load) and belongs to a system family
``f(s)`` with critical resolved shear stress ``tau_f``. The system that activates is the one
with the largest ``x_gs / r_f(s) + e_gs``, where ``r_f = tau_f / tau_ref`` and the scatter
``e_gs`` is Gumbel with scale ``beta``: McFadden's conditional logit (McFadden 1974, "Conditional
logit analysis of qualitative choice behavior", in Frontiers in Econometrics; from memory)::

    P_g(s) = exp(u_gs) / sum_t exp(u_gt),   u_gs = x_gs / (r_f(s) beta)

A trace shows a plane, not a direction, so a family seen on plane ``p`` has probability
``sum_{s on p} P_g(s)``; an uncertain identification (probabilities ``w_p`` over the candidate
planes) enters as the mixture ``sum_p w_p P_g(p)``, weighted by ``1 - p_none``. Each family seen
in a grain counts as one draw. The parameters ``log r_f`` (reference fixed at 0) and ``log beta``
are fitted by L-BFGS-B with the analytic gradient; 95 % intervals come from the profile
likelihood (Wilks: 2 (l_max - l_profile) <= 3.84) or a bootstrap over grains.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from tracefit.errors import TracefitInputError
from tracefit.stats.data import GrainCase, family_labels

__all__ = ["CrssFit", "fit_crss", "CHI2_95"]

CHI2_95 = 3.841458820694124  # chi-square, 1 degree of freedom, 95 % (scipy.stats.chi2.ppf(0.95, 1))
_LOG_R_MAX = float(np.log(50.0))  # ratios are searched within 1/50 .. 50 of the reference
_TESTED_P = 0.05


@dataclass
class _Design:
    names: list  # system family names (parameters)
    X: np.ndarray  # (G, S) drive
    mask: np.ndarray  # (G, S) bool
    F: np.ndarray  # (G, S) family index
    og: np.ndarray  # (O,) grain index of each observation
    w: np.ndarray  # (O,) weights
    A: np.ndarray  # (O, S) soft labels over systems


def _design(cases: list[GrainCase]) -> _Design:
    names: list[str] = []
    for c in cases:
        for s in c.systems:
            if s.name not in names:
                names.append(s.name)
    used = [c for c in cases if any(o.weight > 0 for o in c.observations)]
    S = max((len(c.systems) for c in used), default=0)
    G = len(used)
    X = np.zeros((G, S))
    mask = np.zeros((G, S), bool)
    F = np.zeros((G, S), int)
    og, w, A = [], [], []
    for i, c in enumerate(used):
        n = len(c.systems)
        X[i, :n] = c.drive
        mask[i, :n] = True
        F[i, :n] = [names.index(s.name) for s in c.systems]
        for o in c.observations:
            if o.weight > 0:
                og.append(i)
                w.append(o.weight)
                a = np.zeros(S)
                a[:n] = o.system_weights
                A.append(a)
    return _Design(names, X, mask, F, np.array(og, int), np.array(w, float), np.array(A).reshape(len(og), S))


def _loglik(rho: np.ndarray, b: float, d: _Design, grad: bool = True):
    """Log-likelihood and its gradient in (rho (K,), b)."""
    scale = np.exp(-rho[d.F] - b)
    U = np.where(d.mask, d.X * scale, 0.0)
    Um = np.where(d.mask, U, -np.inf)
    mx = Um.max(axis=1, keepdims=True)
    E = np.where(d.mask, np.exp(Um - mx), 0.0)
    P = E / E.sum(axis=1, keepdims=True)
    Po = P[d.og]
    Q = np.maximum((d.A * Po).sum(axis=1), 1e-300)
    ll = float(np.sum(d.w * np.log(Q)))
    if not grad:
        return ll, None
    Do = d.w[:, None] * Po * (d.A / Q[:, None] - 1.0)
    D = np.zeros_like(P)
    np.add.at(D, d.og, Do)
    DU = D * U
    g_rho = -np.bincount(d.F.ravel(), weights=DU.ravel(), minlength=len(rho))
    g_b = -float(DU.sum())
    return ll, np.append(g_rho, g_b)


@dataclass
class CrssFit:
    """Relative CRSS of each system family, with 95 % intervals.

    Attributes
    ----------
    reference : str
        The reference family's label (its ratio is 1).
    families : list of dict
        One per system family: ``label``, ``name``, ``mode``, ``estimate``, ``low``, ``high``
        (None where the data give no bound on that side), ``status`` (in words),
        ``separated_from_reference``; ``estimate`` is None where the likelihood is largest at the edge
        of the search range (1/50 to 50: a family never seen, or never outrun), ``soft_count`` (families seen, summed probabilities),
        ``grains_tested`` (grains in which it had at least a 5 % chance under the fit, its own
        ratio at the low end of its interval).
    scale : float
        The fitted scatter ``beta`` (drive units: Schmid factor or MPa).
    loglik : float
    n_grains, n_families : int
        Grains and band families that entered the fit.
    method : str
        ``"profile"`` or ``"bootstrap"``.
    notes : list of str
        What the data could not separate, in words.

    Examples
    --------
    >>> fit = CrssFit("{10-10}", [{"label": "{10-10}", "estimate": 1.0, "low": 1.0, "high": 1.0}], 0.03, -10.0,
    ...               20, 20, "profile")
    >>> fit.ratios()["{10-10}"]
    {'estimate': 1.0, 'low': 1.0, 'high': 1.0}
    """

    reference: str
    families: list
    scale: float
    loglik: float
    n_grains: int
    n_families: int
    method: str
    unit: str = "Schmid factor"
    notes: list = field(default_factory=list)

    def ratios(self) -> dict:
        """``{label: {estimate, low, high}}`` (the ``crss_ratios`` of ``tracefit stats --json``)."""
        return {f["label"]: {"estimate": f["estimate"], "low": f["low"], "high": f["high"]} for f in self.families}

    def to_dict(self) -> dict:
        """Plain values (JSON-ready)."""
        from tracefit.results import jsonable

        return jsonable({"reference": self.reference, "crss_ratios": self.ratios(), "families": self.families,
                         "scale": self.scale, "scale_unit": self.unit, "loglik": self.loglik,
                         "n_grains": self.n_grains, "n_families": self.n_families, "method": self.method,
                         "notes": self.notes})

    def to_frame(self):
        """A pandas DataFrame, one row per system family."""
        import pandas as pd

        return pd.DataFrame(self.families)


class _Model:
    """The likelihood with the reference fixed; optimisation and profiles over it."""

    def __init__(self, d: _Design, ref: int):
        self.d, self.ref, self.K = d, ref, len(d.names)
        xs = np.abs(d.X[d.mask])
        self.b0 = float(np.log(0.1 * max(np.median(xs) if xs.size else 1.0, 1e-9)))
        self.bounds_b = (self.b0 - 9.0, self.b0 + 6.0)

    def _full(self, theta, fixed=None):
        rho = np.zeros(self.K)
        free = [k for k in range(self.K) if k != self.ref and k != fixed]
        rho[free] = theta[:len(free)]
        return rho, free

    def fit(self, fixed: int | None = None, value: float = 0.0, start=None):
        from scipy.optimize import minimize

        free = [k for k in range(self.K) if k != self.ref and k != fixed]

        def f(theta):
            rho = np.zeros(self.K)
            rho[free] = theta[:-1]
            if fixed is not None:
                rho[fixed] = value
            ll, g = _loglik(rho, theta[-1], self.d)
            return -ll, -np.append(g[free], g[-1])

        x0 = np.append(np.zeros(len(free)), self.b0) if start is None else np.append(start[free], start[-1])
        bounds = [(-_LOG_R_MAX, _LOG_R_MAX)] * len(free) + [self.bounds_b]
        r = minimize(f, x0, jac=True, method="L-BFGS-B", bounds=bounds, options={"maxiter": 500})
        rho = np.zeros(self.K)
        rho[free] = r.x[:-1]
        if fixed is not None:
            rho[fixed] = value
        return -float(r.fun), np.append(rho, r.x[-1])

    def profile_bound(self, k: int, best: np.ndarray, ll_max: float, side: int):
        """Where 2 (l_max - l_profile) reaches 3.84 on one side of the estimate, or None (open)."""
        from scipy.optimize import brentq

        start = [best]

        def h(t):
            ll, th = self.fit(k, t, start[0])
            start[0] = th
            return 2.0 * (ll_max - ll) - CHI2_95

        edge = side * _LOG_R_MAX
        if abs(best[k] - edge) < 1e-6 or h(edge) < 0:
            return None
        start[0] = best
        return float(brentq(h, best[k], edge, xtol=1e-3))


def fit_crss(cases: list[GrainCase], reference: str | None = None, method: str = "profile", n_boot: int = 200,
             seed: int = 0) -> CrssFit:
    """Fit the relative CRSS of each system family to the grains of a survey (model: module doc).

    Parameters
    ----------
    cases : list of GrainCase
        Grains of one lattice (:func:`tracefit.stats.grain_cases`, or :func:`simulate_population`).
    reference : str, optional
        Label (``{10-10}``), system family name (``prismatic <a>``), trade name (``prismatic``) or
        mode of the reference;
        default the family seen most (summed identification probabilities).
    method : {"profile", "bootstrap"}
        95 % intervals from the profile likelihood, or percentiles of ``n_boot`` refits to grains
        drawn with replacement.
    n_boot : int
        Bootstrap refits.
    seed : int
        Seed of the bootstrap.

    Returns
    -------
    CrssFit

    Raises
    ------
    TracefitInputError
        No grain with a family seen in it, an unknown reference or method, or grains of more
        than one lattice.

    Examples
    --------
    >>> from tracefit.stats import simulate_population
    >>> cases = simulate_population({"basal": 1.5, "prismatic": 1.0, "pyramidal-ca-2": 3.0}, 200, seed=1)
    >>> fit = fit_crss(cases, reference="{10-10}")
    >>> r = fit.ratios()
    >>> fit.reference, r["{0001}"]["low"] < 1.5 < r["{0001}"]["high"]
    ('{10-10}', True)
    """
    # Over 80 lines: the checks at the door, the fit, then one interval per family with the words
    # that say what the data could and could not tell; one straight run reads best.
    if method not in ("profile", "bootstrap"):
        raise TracefitInputError(f"method must be 'profile' or 'bootstrap', got {method!r}")
    if len({c.lattice for c in cases}) > 1:
        raise TracefitInputError("the grains come from more than one lattice: fit one lattice at a time")
    if len({c.unit for c in cases}) > 1:
        raise TracefitInputError("the grains mix axis loads (Schmid factors) and stresses (MPa): fit one kind at a time")
    d = _design(cases)
    if len(d.og) == 0:
        raise TracefitInputError("no grain has an identified band family: there is nothing to fit the CRSS ratios to")
    systems = {s.name: s for c in cases for s in c.systems}
    labels = family_labels(list(systems.values()))
    soft = np.zeros(len(d.names))
    for o_w, a, g in zip(d.w, d.A, d.og):
        on = a > 0
        for k in set(d.F[g][on].tolist()):
            soft[k] += o_w * float(a[on & (d.F[g] == k)].max())
    ref = _reference_index(reference, d.names, labels, systems, soft)
    model = _Model(d, ref)
    ll_max, best = model.fit()
    lo, hi = _intervals(model, best, ll_max, method, n_boot, seed)
    tested = [_tested(d, best, k, -_LOG_R_MAX if lo[k] is None else min(lo[k], best[k])) for k in range(len(d.names))]
    fams, notes = [], []
    for k, name in enumerate(d.names):
        s = systems[name]
        # a maximum at the edge of the search range is no estimate: only the interval's finite end means anything
        est = None if abs(best[k]) >= _LOG_R_MAX - 1e-3 else _sig(np.exp(best[k]))
        low = None if lo[k] is None else _sig(np.exp(lo[k]))
        high = None if hi[k] is None else _sig(np.exp(hi[k]))
        status = _status(k == ref, low, high, soft[k], tested[k])
        if k != ref and status != "estimated":
            notes.append(f"{labels[name]} ({name}): {status}")
        fams.append({"label": labels[name], "name": name, "mode": s.mode, "estimate": est, "low": low, "high": high,
                     "status": status, "soft_count": round(float(soft[k]), 3), "grains_tested": tested[k],
                     "separated_from_reference": None if k == ref else bool(
                         (low is not None and low > 1.0) or (high is not None and high < 1.0))})
    notes += _overlaps(fams, ref)
    return CrssFit(labels[d.names[ref]], fams, float(np.exp(best[-1])), ll_max, len(d.X), len(d.og), method,
                   cases[0].unit, notes)


def _sig(x: float, digits: int = 4) -> float:
    """x to ``digits`` significant figures (the intervals are far wider than that)."""
    return float(f"{float(x):.{digits}g}")


def _reference_index(reference, names, labels, systems, soft) -> int:
    if reference is None:
        return int(np.argmax(soft))
    from tracefit.crystal import TRADE_NAMES

    want = str(reference).strip().lower()
    for k, n in enumerate(names):
        if want in (labels[n].lower(), n.lower()) or TRADE_NAMES.get(want, "").lower() == n.lower():
            return k
    by_mode = [k for k, n in enumerate(names) if systems[n].mode == want]
    if by_mode:
        return max(by_mode, key=lambda k: soft[k])
    raise TracefitInputError(f"reference {reference!r} is not a system family of this survey; choose one of "
                             + ", ".join(labels[n] for n in names))


def _probabilities(theta, d: _Design) -> np.ndarray:
    rho, b = theta[:-1], theta[-1]
    U = np.where(d.mask, d.X * np.exp(-rho[d.F] - b), -np.inf)
    E = np.exp(U - U.max(axis=1, keepdims=True))
    return E / E.sum(axis=1, keepdims=True)


def _tested(d: _Design, theta, k: int, log_r: float) -> int:
    """Grains in which family ``k`` has at least a 5 % chance with its ratio at the low end of its interval."""
    th = np.array(theta, float)
    th[k] = log_r
    P = _probabilities(th, d)
    return int(sum((P[g][d.F[g] == k].sum() >= _TESTED_P) for g in range(len(P))))


def _intervals(model: _Model, best, ll_max, method, n_boot, seed):
    K = model.K
    lo: list = [best[k] for k in range(K)]
    hi: list = [best[k] for k in range(K)]
    others = [k for k in range(K) if k != model.ref]
    if method == "profile":
        for k in others:
            lo[k] = model.profile_bound(k, best, ll_max, -1)
            hi[k] = model.profile_bound(k, best, ll_max, +1)
        return lo, hi
    rng = np.random.default_rng(seed)
    d = model.d
    G = len(d.X)
    draws = []
    for _ in range(int(n_boot)):
        pick = rng.integers(0, G, G)
        # each grain drawn keeps its observations; rows of the design are re-indexed
        sel = np.concatenate([np.flatnonzero(d.og == g) for g in pick]) if G else np.zeros(0, int)
        newg = np.concatenate([np.full(int((d.og == g).sum()), i) for i, g in enumerate(pick)])
        db = _Design(d.names, d.X[pick], d.mask[pick], d.F[pick], newg, d.w[sel], d.A[sel])
        draws.append(_Model(db, model.ref).fit(start=best)[1])
    draws = np.array(draws)
    for k in others:
        a, b = np.percentile(draws[:, k], [2.5, 97.5])
        lo[k] = None if a <= -_LOG_R_MAX + 1e-3 else float(a)
        hi[k] = None if b >= _LOG_R_MAX - 1e-3 else float(b)
    return lo, hi


def _status(is_ref, low, high, soft, tested) -> str:
    if is_ref:
        return "reference"
    if low is None and high is None:
        return ("never seen and " if soft < 0.5 else "") + "not separated: the likelihood is flat, the data do not constrain it"
    if soft < 0.5:
        return "never seen: only a lower bound (harder than the low end)"
    if tested == 0:
        return "never stressed enough to be tested against the others"
    if high is None:
        return "lower bound only"
    if low is None:
        return "upper bound only"
    return "estimated"


def _overlaps(fams, ref) -> list[str]:
    out = []
    for i in range(len(fams)):
        for j in range(i + 1, len(fams)):
            a, b = fams[i], fams[j]
            lo_a, hi_a = a["low"] or 0.0, a["high"] or np.inf
            lo_b, hi_b = b["low"] or 0.0, b["high"] or np.inf
            if i == ref or j == ref:
                other = b if i == ref else a
                if other["separated_from_reference"] is False:
                    out.append(f"the data do not separate {other['label']} from the reference {fams[ref]['label']} "
                               "(its 95 % interval contains 1)")
            elif lo_a <= hi_b and lo_b <= hi_a:
                out.append(f"the data do not separate {a['label']} from {b['label']} (their 95 % intervals overlap)")
    return out
