"""The first-price equilibrium when bidders differ: groups of bidders, each with its own value
model, solved as a boundary-value problem.

In score space (a bid b ranked as m b, m the group's preference factor; see :mod:`groups`)
group i's inverse bid function phi_i(b), the value that bids b, solves, with N bidders in all
and n_k in group k,

    phi_i'(b) = (F_i / f_i)(phi_i) [ (1/(N - 1)) sum_k n_k / (phi_k - b) - 1 / (phi_i - b) ],

from phi_i(b0) = b0 at the floor b0 (the reserve, or the common bottom of the values) to
phi_i(b_top) = omega_i, the top of group i's values, at one top bid b_top that is itself
unknown (Griesmer, Levitan and Shubik 1967; Lebrun 1999; Krishna 2009, ch. 4). Shooting back
from a guessed b_top is unstable (Fibich and Gavish 2011): errors grow like (b - b0)^-N towards
the floor.

Here the markdowns d_i = phi_i - b are Chebyshev series in a variable tau on [0, 1] that
starts at the floor, with d_i = 0 there built in (d_i = L tau P_i(tau), L = b_top - b0, one
more unknown); the first-order conditions, multiplied through by d_i so that the floor is not
singular, are collocated at interior Chebyshev points together with the G top conditions. The
floor is a singular point from which a (G - 1)-parameter family of solutions leaves (Marshall,
Meurer, Richard and Stromquist 1994), so the system has G - 1 more equations than unknowns and
is solved by Gauss-Newton least squares. Near the floor the markdowns grow like b - b0 where the
values start there with a density, and like sqrt(b - b0) where a reserve cuts into them; then
b - b0 runs as L tau^2, so that d_i stays smooth in tau. Near the top the markdowns are smooth
where each group's density is positive at its top. A group without one (no top, or a density
vanishing there) is offered only where it is left to bid on alone, above every other group's last
bid, where the envelope formula gives its bids exactly.

Where the groups' values end at different tops a common top bid may not exist: weaker groups
then stop bidding in turn below it, each at its top value with zero bid density, and the groups
left solve the same equations among themselves above (Lebrun 1999 on the equilibrium's
existence and uniqueness; Krishna 2009, ch. 4). Each such stretch of bids is a span of its own,
collocated the same way, its start tied to the span below and its length one more unknown.
"""
from __future__ import annotations

import functools
import itertools
import math

import numpy as np
from numpy.polynomial import chebyshev as cheb
from scipy import integrate, linalg

from . import budget
from .errors import ParameterError

#: Collocation points per group, tried in turn until the residual of the first-order
#: conditions between the nodes is below FOC_TOLERANCE.
DEGREES = (24, 32, 40, 48, 64, 96, 128, 160)
FOC_TOLERANCE = 1e-9
#: A least-squares solution is taken (and judged by its residual between the nodes) when the
#: sum of squares of its collocation residuals is below this.
ACCEPT_COST = 1e-10
#: ... or, where the Gauss-Newton step has vanished (a least-squares minimum: too few points for
#: the collocation residuals all to vanish), below this.
LOOSE_COST = 1e-4
#: The largest residual of the first-order conditions between the nodes taken as a solution.
ACCEPT_RESIDUAL = 1e-6
#: At the fewest points a solution this close already tells which shape the equilibrium has.
SHAPE_RESIDUAL = 1e-2
NORMAL = __import__("os").environ.get("NORMAL", "1") == "1"
_GL32 = np.polynomial.legendre.leggauss(32)


def _upper_points(m):
    return max(16, m // 2)


def _chebyshev_points(k):
    """The k Chebyshev points of the first kind on (0, 1)."""
    return 0.5 - 0.5 * np.cos((np.arange(k) + 0.5) * np.pi / k)


@functools.lru_cache(maxsize=16)
def _derivative_matrix(m):
    """The (m - 1) x m matrix taking Chebyshev coefficients of T_0..T_{m-1} to their derivative's."""
    return cheb.chebder(np.eye(m), axis=0)


def _least_squares_step(J, F):
    """The Gauss-Newton step, min |J step + F|: by the normal equations with columns scaled to
    unit length (Cholesky, twice as fast as QR; the collocation Jacobians are conditioned like
    m^2, so squaring that stays far from rounding), by pivoted QR where Cholesky fails."""
    norms = np.sqrt(np.einsum("ij,ij->j", J, J))
    if NORMAL and np.all(norms > 0.0):
        Js = J / norms
        try:
            factor = linalg.cho_factor(Js.T @ Js, check_finite=False)
            step = -linalg.cho_solve(factor, Js.T @ F, check_finite=False) / norms
            if np.all(np.isfinite(step)):
                return step
        except linalg.LinAlgError:
            pass
    return linalg.lstsq(J, -F, lapack_driver="gelsy", check_finite=False)[0]


class ScoreGroup:
    """One group in score space: scores W = m X, X from ``model`` (a forward value model),
    ``count`` bidders."""

    def __init__(self, model, count, multiplier):
        self.model, self.count, self.m = model, int(count), float(multiplier)
        self.lower, self.top = self.m * model.lower, self.m * model.upper
        span = model.upper - model.lower
        #: Whether the density at the top is too small, against the span's average, for inverse
        #: bids to stay smooth in the bid up to it (uniform: 1, power(a): a; no top, or a density
        #: vanishing there as a lognormal cost's does at 0: flat).
        self.flat_top = not (math.isfinite(span) and float(model.pdf(np.array(model.upper - 1e-6 * span))) * span >= 1e-2)
        #: The top, or where a flat top's last 10^-6 of probability starts: the scale of the values.
        self.reach = self.at_quantile(1.0 - 1e-6) if self.flat_top and not math.isfinite(self.top) else self.top

    def at_quantile(self, u):
        """The score at quantile u (the model's, where 1 - u is exact in the upper tail)."""
        u = np.asarray(u, float)
        return self.m * self.model.value_at(u, 1.0 - u)

    def cdf(self, w):
        return self.model.cdf(np.asarray(w, float) / self.m)

    def pdf(self, w):
        return self.model.pdf(np.asarray(w, float) / self.m) / self.m

    def inverse_hazard_low(self, w):
        """F / f of the scores at w."""
        f = self.pdf(w)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(f > 0.0, self.cdf(w) / f, 0.0)


class AsymmetricBids:
    """The first-price equilibrium of ``groups`` (:class:`ScoreGroup`) above the score floor
    ``floor``, which every group's scores reach from at or below it.

    The bids run over spans of bids: the first from the floor, each later one from the bid at
    which the group with the lowest top value still bidding stops (its inverse bid reaches its
    top value with zero bid density, phi' = 0, so that the others' bid densities do not jump),
    the last ending where every group left bids its top value at one common top bid. Where a
    single group of several bidders is left, it bids on alone by the envelope formula."""

    def __init__(self, groups, floor):
        self.groups, self.b0 = groups, float(floor)
        self.G = len(groups)
        self.n = np.array([g.count for g in groups], float)
        self.N = self.n.sum()
        self.tops = np.array([g.top for g in groups])
        self.q = 2 if any(float(g.cdf(self.b0)) > 0.0 for g in groups) else 1
        self.scale = float(max(g.reach for g in groups) - self.b0)
        self.spans, self.residual, self._table = None, math.inf, {}
        shapes = self._shapes()
        # The shape (which groups stop first) is chosen at the fewest points from straight starting
        # bids, where a solve is cheap, and then refined; a shape not found so is tried once more
        # from every start, with more points.
        for quick in (True, False):
            for drops in shapes:
                self._shape(drops)
                self._quick = quick
                if self._search(DEGREES[:1] if quick else DEGREES, SHAPE_RESIDUAL):
                    self._quick = False
                    found = (self.m, self._flat(), self.residual)
                    if found[2] > FOC_TOLERANCE:  # refine from the shape found, with more points
                        more = [m for m in DEGREES if m > found[0]]
                        if not (more and self._search(more, last=(found[0], found[2]))) or self.residual > found[2]:
                            self._set(found[0], found[1])
                            self.residual = found[2]
                    if self.residual <= ACCEPT_RESIDUAL:
                        break
                    self.spans = None
            if self.spans is not None:
                break
        if self.spans is None:
            raise ParameterError("bidder_groups", "the first-price equilibrium of these groups was not found; a reserve "
                                                  "(maximum price) that cuts into the values sometimes helps; or ask for "
                                                  "second price")

    # --- the shape: which groups stop bidding below the top bid, in turn ---------------------
    def _shapes(self):
        """The shapes to try, as the groups that stop first, in turn: the groups whose values end
        lowest, each below every group left, as long as at least two bidders are left to bid on
        (a lone bidder above them would face no competition). The likely shape first (see
        :meth:`_likely_stops`), then from most stops to the common top bid."""
        order = [int(i) for i in np.argsort(self.tops, kind="stable")]
        shapes = [()]
        for k in range(1, self.G):
            drops, rest = order[:k], order[k:]
            if self.tops[drops[-1]] >= min(self.tops[rest]) or self.n[rest].sum() < 2:
                break
            shapes.append(tuple(drops))
        flat = [i for i, g in enumerate(self.groups) if g.flat_top]
        if flat:
            # the inverse bids of a group with a flat top steepen without end at the common top
            # bid: offered where that group is the only one left, bidding on alone above the others
            whole = tuple(i for i in order if i not in flat)
            return [whole] if len(flat) == 1 and self.n[flat[0]] >= 2 and whole in shapes else []
        likely = min(self._likely_stops(order), len(shapes) - 1)
        return [shapes[likely]] + [sh for sh in shapes[::-1] if sh != shapes[likely]]

    def _likely_stops(self, order):
        """How many groups will likely stop below the top bid: the weakest group still bidding can
        bid its top value w at a common top bid b only if a higher bid would not pay, (w - b) S(b)
        >= 1, S(b) = (1/(N_A - 1)) sum_k n_k / (w_k - b) over the N_A bidders still bidding (their
        first-order conditions at the top); b is estimated as in a symmetric auction of uniform
        values, (N_A - 1)/N_A of the way to the lowest top. Only the order of the tries rests on it."""
        for k in range(self.G - 1):
            act = order[k:]
            na = self.n[act]
            w = self.tops[act]
            b = self.b0 + (na.sum() - 1.0) / na.sum() * (w[0] - self.b0)
            if (w[0] - b) * (na / (w - b)).sum() / (na.sum() - 1.0) >= 1.0:
                return k
        return self.G - 1

    def _shape(self, drops):
        """Set the shape: ``drops`` stop bidding in turn (none: every group to the common top)."""
        self.drops, self.spans = tuple(drops), None
        rest = [i for i in range(self.G) if i not in self.drops]
        self.alone = rest[0] if len(rest) == 1 else None
        self.K = len(self.drops) + (self.alone is None)  # spans solved by collocation
        self.active = [np.array([i for i in range(self.G) if i not in self.drops[:s]]) for s in range(self.K)]

    def _last_span(self, i):
        """The last span in which group i bids (the one at whose top it stops)."""
        return self.drops.index(i) if i in self.drops else self.K - 1

    def _search(self, degrees, accept=None, last=None):
        """Solve with each number of points in turn (warm from the last) until the residual between
        the nodes is small; keep the best solution. True if one was found."""
        best, todo, misses = None, list(degrees), 0
        while todo:
            m = todo.pop(0)
            budget.check()
            x = self._solve(m)
            if x is None:
                misses += 1
                if best is None and misses >= 3:  # no start converges with more points either
                    break
                continue
            res = self.foc_residual()
            if last is not None and res > 0.5 * last[1]:
                # no spectral progress from the last solution: it may lie on a spurious branch of
                # least-squares minima; the starts may find the true one
                x, res = self._restart(m, x, res)
            if best is None or res < best[2]:
                best = (m, x, res)
            if res < FOC_TOLERANCE:
                break
            todo, last = self._skip(todo, res, last), (m, res)
        if best is None or best[2] > (ACCEPT_RESIDUAL if accept is None else accept):
            self.spans = None
            return False
        self._set(best[0], best[1])
        self.residual = best[2]
        return True

    def _skip(self, todo, res, last):
        """The point counts still to try, less those that will not bring the residual below
        FOC_TOLERANCE if it keeps falling geometrically, at the rate seen since the ``last``
        (points, residual)."""
        if last is None or not 0.0 < res < 0.5 * last[1]:  # not falling as a spectral method's does
            return todo
        rate = max((res / last[1]) ** (1.0 / (self.m - last[0])), 0.3)
        enough = [m for m in todo if res * rate ** (m - self.m) < FOC_TOLERANCE]
        return todo[todo.index(enough[0]):] if enough else todo[-1:]

    def _rising(self, points=257):
        """Whether every inverse bid rises on the solved spans."""
        tau = (np.arange(points) + 0.5) / points
        for s in range(self.K):
            _, _, dphi = self.at_tau(s, tau)
            if not np.all(dphi[self.active[s]] > -1e-9):
                return False
        return True

    def _stays_out(self, points=129, slack=1e-6):
        """Whether no group that stopped would gain by bidding again above its last bid: at its top
        value w_j a higher bid b pays while (w_j - b) S(b) > 1, S(b) the rate at which a higher bid
        raises the chance of beating everyone still bidding (from their first-order conditions);
        within ``slack``, as loose as a rough solution's residual."""
        tau = (np.arange(points) + 0.5) / points
        for s in range(1, self.K):
            b, phi, _ = self.at_tau(s, tau)
            act = self.active[s]
            rate = (self.n[act, None] / (phi[act] - b)).sum(0) / (self.n[act].sum() - 1.0)
            for j in self.drops[:s]:
                if np.max((self.tops[j] - b) * rate) > 1.0 + slack:
                    return False
        if self.alone is not None:
            k = self.n[self.alone]
            grp = self.groups[self.alone]
            u_star = float(grp.cdf(self.v_star))
            w = grp.at_quantile(u_star + (1.0 - 1e-9 - u_star) * tau)
            b = self._alone_bids(w)
            rate = k / ((k - 1.0) * (w - b))
            for j in self.drops:
                if np.max((self.tops[j] - b) * rate) > 1.0 + slack:
                    return False
        return True

    # --- the spans: b = b0 + L0 tau^q in the first, b = B_s + L_s tau above -----------------------
    def _basis(self, tau, m):
        """Chebyshev values and tau-derivatives of T_0..T_{m-1}(2 tau - 1)."""
        x = 2.0 * np.asarray(tau, float) - 1.0
        V = cheb.chebvander(x, m - 1)
        return V, 2.0 * V[:, : m - 1] @ _derivative_matrix(m)

    def _points(self, m):
        """Chebyshev terms per group in each span: m in the first; half as many (at least 16) in the
        later ones, which start at a regular point and converge much faster than the first, whose
        floor is singular."""
        return [m] + [_upper_points(m)] * (self.K - 1)

    def _layout(self, m):
        """Where each span's unknowns (its length L_s, then its groups' coefficients) start."""
        return np.concatenate([[0], np.cumsum([1 + len(a) * k for a, k in zip(self.active, self._points(m))])])

    def _unpack(self, x, m):
        off = self._layout(m)
        return [(float(x[off[s]]), x[off[s] + 1: off[s + 1]].reshape(len(self.active[s]), k))
                for s, k in enumerate(self._points(m))]

    def _nodes(self, m):
        """Collocation nodes and basis values: m points in the first span (the floor's condition is
        built in), mu - 1 in each later one of mu terms (its start is tied to the span below)."""
        mu = _upper_points(m)
        tau0, tau_u = _chebyshev_points(m), _chebyshev_points(mu)
        tau = _chebyshev_points(mu - 1)
        V0, D0 = self._basis(tau0, m)
        V, D = self._basis(tau, mu)
        ends0, ends = self._basis(np.array([1.0]), m), self._basis(np.array([0.0, 1.0]), mu)
        return {"m": m, "mu": mu, "tau0": tau0, "V0": V0, "D0": D0, "tau": tau, "V": V, "D": D,
                "tau_u": tau_u, "Vu": self._basis(tau_u, mu)[0],
                "V1": ends0[0][0], "D1": ends0[1][0], "Vz": ends[0][0], "V1u": ends[0][1], "D1u": ends[1][1]}

    def _symmetric(self, grp, values):
        """The symmetric first-price bids (score units) at score ``values`` if all N bidders were
        of this group: each group's shape near the floor and the top, for the starting guess."""
        from .auction import ForwardAuction  # the symmetric engine; auction.py does not import this module

        x = np.asarray(values, float) / grp.m
        floor = self.b0 / grp.m
        auc = ForwardAuction(grp.model, int(self.N), floor if floor > grp.model.lower else None)
        s = np.minimum(grp.model.neg_log_cdf(x), auc.s_r)
        b = np.full(x.shape, auc.floor)
        live = np.isfinite(s)
        b[live] = auc.bids.at_s(s[live])
        return grp.m * b

    def _starts(self, m):
        """Starting points: straight inverse bids (cheap, enough where the groups' values start
        with a density at the floor), then each group's symmetric inverse bid function (which
        knows the shape near a reserve), stretched so that its top bid falls where its span
        ends, at the groups' symmetric top bids in turn as the top bid."""
        for share in (None, 0.25, 0.8):
            ends, _, markdown = self._straight(share)
            yield self._fit(m, ends, markdown)
        if self._quick:
            return
        grids, tops = [], []
        for grp in self.groups:
            u0 = float(grp.cdf(self.b0))
            w = np.maximum(grp.at_quantile(u0 + (1.0 - 1e-9 - u0) * (0.5 - 0.5 * np.cos(np.linspace(0.0, np.pi, 201)))),
                           self.b0)
            b = self._symmetric(grp, w)
            grids.append((w, b))
            tops.append(b[-1])
        tops = np.array(tops)
        for top in (float(np.mean(tops)), float(np.min(tops)), float(np.max(tops)), float(np.median(tops))):
            if not top > self.b0:
                continue
            # the spans' ends where the straight guess puts them, scaled to this top bid
            ends, end_bid, _ = self._straight(None)
            k = (top - self.b0) / (ends[-1] - self.b0) if self.alone is None else 1.0
            ends, end_bid = self.b0 + k * (ends - self.b0), self.b0 + k * (end_bid - self.b0)

            def markdown(i, b, last_bid=end_bid):
                w, bs = grids[i]
                return np.interp(self.b0 + (b - self.b0) * (tops[i] - self.b0) / (last_bid[i] - self.b0), bs, w) - b

            yield self._fit(m, ends, markdown)

    def _straight(self, share):
        """(span ends, each group's last bid, markdown(i, b)): inverse bids whose markdowns grow
        like (b - b0)^(1/q), meeting the tops at span ends ``share`` of the way from the floor to
        the top values of the groups that stop there (None: (N - 1)/N, as in a symmetric auction
        of uniform values)."""
        share = (self.N - 1.0) / self.N if share is None else share
        last = [self.drops[s] if s < len(self.drops) else None for s in range(self.K)]
        ends = np.array([self.b0 + share * ((self.tops[j] if j is not None else self.tops[self.active[s]].min()) - self.b0)
                         for s, j in enumerate(last)])
        end_bid = np.array([ends[self._last_span(i)] for i in range(self.G)])
        end_markdown = self.tops - end_bid
        if self.alone is not None:
            # where the last group to stop does, its zero bid density asks of the group bidding on
            # alone the markdown d = n / (n - 1) d_stop (its first-order condition at that bid)
            a, j = self.alone, self.drops[-1]
            end_markdown[a] = self.n[a] / (self.n[a] - 1.0) * end_markdown[j]

        def markdown(i, b):
            with np.errstate(all="ignore"):
                return end_markdown[i] * np.clip((b - self.b0) / (end_bid[i] - self.b0), 0.0, None) ** (1.0 / self.q)

        return ends, end_bid, markdown

    def _fit(self, m, ends, markdown):
        """The unknowns whose spans end at ``ends`` and whose markdowns interpolate
        ``markdown(i, b)`` at each span's nodes."""
        nd = self._nodes(m)
        parts = []
        for s, act in enumerate(self.active):
            start = self.b0 if s == 0 else ends[s - 1]
            L = ends[s] - start
            if s == 0:
                b = self.b0 + L * nd["tau0"] ** self.q
                vals, Vfit = [markdown(i, b) / (L * nd["tau0"]) for i in act], nd["V0"]
            else:
                b = start + L * nd["tau_u"]
                vals, Vfit = [markdown(i, b) for i in act], nd["Vu"]
            with np.errstate(all="ignore"):
                c = np.linalg.solve(Vfit, np.array(vals).T).T
            parts.append(np.concatenate([[L], c.ravel()]))
        return np.concatenate(parts)

    def _equations(self, x, jac):
        """The collocated first-order conditions, each span's start tied to the one below, and the
        ends (a stopping group: its top value with phi' = 0; the last span: every top value):
        (residuals, whether x is admissible, and with ``jac`` their Jacobian)."""
        m = self._nd["m"]
        spans, off = self._unpack(x, m), self._layout(m)
        Ls = np.array([L for L, _ in spans])
        parts = [self._floor_span(spans[0], off[-1], jac)]
        parts += [self._upper_span(s, spans[s], Ls, off, jac) for s in range(1, self.K)]
        parts += [(value, True, row) for value, row in self._ties_and_ends(spans, Ls, off)]
        F = np.concatenate([np.atleast_1d(p[0]) for p in parts])
        ok = bool(np.all(Ls > 0.0)) and all(p[1] for p in parts) and bool(np.all(np.isfinite(F)))
        if not jac:
            return F, ok
        return F, ok, np.vstack([p[2] for p in parts])

    def _floor_span(self, span, cols, jac):
        """The first span's equations: d_i = L tau P_i(tau), b = b0 + L tau^q, the first-order
        conditions multiplied through by d_i and divided by L."""
        nd, q = self._nd, self.q
        m = nd["m"]
        L, c = span
        tau, V, D = nd["tau0"], nd["V0"], nd["D0"]
        P, dP = c @ V.T, c @ D.T
        g = tau**q
        beta = q * tau ** (q - 1)  # d(b - b0)/dtau / L
        d = L * tau * P
        e = (P + tau * dP) / beta  # d d_i / db
        phi = self.b0 + L * g + d
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            S = (self.n[:, None] / d).sum(0) / (self.N - 1.0)
            rho = np.array([grp.inverse_hazard_low(p) for grp, p in zip(self.groups, phi)])
            A = d * (1.0 + e) - rho * (d * S - 1.0)
        ok = bool(np.all(d > 0.0))
        if not jac:
            return (A / L).ravel(), ok, None
        J = np.zeros((self.G * m, cols))
        with np.errstate(divide="ignore", invalid="ignore"):
            drho = self._rho_slope(range(self.G), phi)
            dA_dd = (1.0 + e) - rho * (S - self.n[:, None] / ((self.N - 1.0) * d)) - drho * (d * S - 1.0)
            cross = rho * d / (self.N - 1.0)  # times n_k / d_k^2 for group k
        dd_dc = (L * tau)[:, None] * V
        de_dc = (V + tau[:, None] * D) / beta[:, None]
        for i in range(self.G):
            r = slice(i * m, (i + 1) * m)
            dA_dL = dA_dd[i] * tau * P[i] - drho[i] * (d[i] * S - 1.0) * g
            for k in range(self.G):
                ck = slice(1 + k * m, 1 + (k + 1) * m)
                if k == i:
                    J[r, ck] = (dA_dd[i][:, None] * dd_dc + d[i][:, None] * de_dc) / L
                else:
                    w = cross[i] * self.n[k] / d[k] ** 2
                    J[r, ck] = w[:, None] * dd_dc / L
                    dA_dL = dA_dL + w * tau * P[k]
            J[r, 0] = dA_dL / L - A[i] / L**2
        return (A / L).ravel(), ok, J

    def _upper_span(self, s, span, Ls, off, jac):
        """Span s's equations (s >= 1): d_i = Q_i(tau), b = B_s + L_s tau with B_s = b0 + L_0 + ...
        + L_(s-1), among the groups still bidding, divided by the value scale."""
        nd = self._nd
        tau, V, D, mu = nd["tau"], nd["V"], nd["D"], nd["mu"]
        L, c = span
        act = self.active[s]
        na = self.n[act]
        NA = na.sum()
        d = c @ V.T
        e = (c @ D.T) / L
        phi = self.b0 + Ls[:s].sum() + L * tau + d
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            S = (na[:, None] / d).sum(0) / (NA - 1.0)
            rho = np.array([self.groups[i].inverse_hazard_low(p) for i, p in zip(act, phi)])
            A = d * (1.0 + e) - rho * (d * S - 1.0)
        ok = bool(np.all(d > 0.0))
        if not jac:
            return (A / self.scale).ravel(), ok, None
        k_, n_ = len(act), mu - 1
        J = np.zeros((k_ * n_, off[-1]))
        with np.errstate(divide="ignore", invalid="ignore"):
            drho = self._rho_slope(act, phi)
            dA_dd = (1.0 + e) - rho * (S - na[:, None] / ((NA - 1.0) * d)) - drho * (d * S - 1.0)
            cross = rho * d / (NA - 1.0)
            dA_db = -drho * (d * S - 1.0)
        for a in range(k_):
            r = slice(a * n_, (a + 1) * n_)
            for k in range(k_):
                ck = slice(off[s] + 1 + k * mu, off[s] + 1 + (k + 1) * mu)
                if k == a:
                    J[r, ck] = dA_dd[a][:, None] * V + d[a][:, None] * D / L
                else:
                    J[r, ck] = (cross[a] * na[k] / d[k] ** 2)[:, None] * V
            J[r, off[s]] = -d[a] * e[a] / L + dA_db[a] * tau
            for t in range(s):
                J[r, off[t]] = dA_db[a]
        return (A / self.scale).ravel(), ok, J / self.scale

    def _rho_slope(self, groups, phi):
        """d/dw of F/f for the listed groups at their rows of phi (central differences)."""
        h = 1e-7 * self.scale
        return np.array([(self.groups[i].inverse_hazard_low(p + h) - self.groups[i].inverse_hazard_low(p - h)) / (2 * h)
                         for i, p in zip(groups, phi)])

    def _ties_and_ends(self, spans, Ls, off):
        """(value, Jacobian row) of each tie (a group's markdown continuous where a span starts)
        and each end condition (a stopping group's top value with phi' = 0 at its span's top; in
        the last span without a lone group, every group's top value)."""
        nd = self._nd
        m, mu = nd["m"], nd["mu"]
        V1, D1, Vz, V1u, D1u = nd["V1"], nd["D1"], nd["Vz"], nd["V1u"], nd["D1u"]
        cols, out = off[-1], []

        def coefs(s, a):
            k = m if s == 0 else mu
            return slice(off[s] + 1 + a * k, off[s] + 1 + (a + 1) * k)

        def end_markdown(s, a):
            """(d at the span's top, its row of derivatives) for the span's a-th group."""
            L, c = spans[s]
            row = np.zeros(cols)
            if s == 0:
                row[coefs(s, a)], row[off[0]] = L * V1, c[a] @ V1
                return L * (c[a] @ V1), row
            row[coefs(s, a)] = V1u
            return c[a] @ V1u, row

        for s in range(1, self.K):
            L, c = spans[s]
            for a, i in enumerate(self.active[s]):
                below, row = end_markdown(s - 1, int(np.flatnonzero(self.active[s - 1] == i)[0]))
                row = -row
                row[coefs(s, a)] += Vz
                out.append(((c[a] @ Vz - below) / self.scale, row[None, :] / self.scale))
        for s in range(self.K):
            L, c = spans[s]
            stop = self.drops[s] if s < len(self.drops) else None
            for a, i in enumerate(self.active[s]):
                if stop is not None and i != stop:
                    continue
                dm, row = end_markdown(s, a)
                row[[off[t] for t in range(s + 1)]] += 1.0
                out.append(((self.b0 + Ls[: s + 1].sum() + dm - self.tops[i]) / self.scale, row[None, :] / self.scale))
                if stop is None:
                    continue
                row = np.zeros(cols)  # phi_i' = 0 at the top of the span
                if s == 0:
                    row[coefs(s, a)] = (V1 + D1) / self.q
                    out.append((1.0 + (c[a] @ (V1 + D1)) / self.q, row[None, :]))
                else:
                    row[coefs(s, a)], row[off[s]] = D1u / L, -(c[a] @ D1u) / L**2
                    out.append((1.0 + (c[a] @ D1u) / L, row[None, :]))
        return out

    def _solve(self, m):
        """A solution with m points that passes for an equilibrium of this shape (set, and
        returned), from the last one or, failing that, from each start in turn; None if none does."""
        self._nd = self._nodes(m)
        kept = (self.m, self._flat()) if self.spans is not None else None
        # the last solution first, where there is one; the starts where it leads nowhere
        for start in itertools.chain([self._warm(m)] if kept else [], self._starts(m)):
            x = self._newton(start)
            if x is None:
                continue
            self._set(m, x)
            if self._admissible():
                return x
        if kept:
            self._set(*kept)
        else:
            self.spans = None
        return None

    def _restart(self, m, x, res):
        """(unknowns, residual): the better of the warm solution x and one from the starts, at m points."""
        self.spans = None
        y = self._solve(m)
        if y is not None and self.foc_residual() < res:
            return y, self.foc_residual()
        self._set(m, x)
        return x, res

    def _admissible(self):
        """Whether the solution passes for an equilibrium of this shape: every inverse bid rising
        (a least-squares solution with a group's inverse bid falling near the top says that group
        stops earlier), no stopped group wanting to bid again, and the first-order conditions met
        to SHAPE_RESIDUAL between the nodes."""
        res = self.foc_residual()
        return res < SHAPE_RESIDUAL and self._rising() and self._stays_out(slack=max(1e-6, 10.0 * res))

    def _newton(self, x):
        with np.errstate(all="ignore"):  # a failed start is a None, not a warning
            return self._newton_steps(x)

    def _newton_steps(self, x):
        F, ok = self._equations(x, jac=False)
        if not ok:
            return None
        cost = float(F @ F)
        slow, settled = 0, False
        for _ in range(40):
            budget.check()
            F, ok, J = self._equations(x, jac=True)
            step = _least_squares_step(J, F)
            # at a least-squares minimum the Gauss-Newton step vanishes (no more points: the
            # collocation residuals cannot all be zero)
            settled = np.max(np.abs(step)) <= 1e-9 * max(1.0, np.max(np.abs(x)))
            t = 1.0
            while t > 1e-8:
                trial = x + t * step
                Fn, ok = self._equations(trial, jac=False)
                cn = float(Fn @ Fn) if ok else math.inf
                if cn < cost or cn < 1e-30:
                    break
                t *= 0.5
            else:
                break
            small = np.max(np.abs(t * step)) <= 1e-14 * max(1.0, np.max(np.abs(x)))
            slow = slow + 1 if cn > 0.97 * cost and cn > ACCEPT_COST else 0
            # converged: the cost at rounding level, no longer falling fast as Newton's does
            stalled = cn < ACCEPT_COST and cn > 0.1 * cost
            x, cost = trial, cn
            if settled or small or stalled or cost < 1e-30 or slow >= 8:  # converged, or crawling towards no solution
                break
        # A converged least-squares solution whose collocation residuals are small (or at a minimum
        # a little above, with too few points); whether it is accurate enough is the residual
        # between the nodes' to say (foc_residual).
        return x if cost < ACCEPT_COST or (settled and cost < LOOSE_COST) else None

    def _warm(self, m):
        """The last solution's coefficients, cut or padded to as many terms as m asks."""
        parts = []
        for (L, c), want in zip(self.spans, self._points(m)):
            k = min(want, c.shape[1])
            cm = np.zeros((c.shape[0], want))
            cm[:, :k] = c[:, :k]
            parts.append(np.concatenate([[L], cm.ravel()]))
        return np.concatenate(parts)

    def _flat(self):
        return np.concatenate([np.concatenate([[L], c.ravel()]) for L, c in self.spans])

    def _set(self, m, x):
        self.m = m
        self.spans = self._unpack(x, m)
        self.starts = self.b0 + np.concatenate([[0.0], np.cumsum([L for L, _ in self.spans])])
        self.span_top = float(self.starts[-1])
        self._table = {}
        if self.alone is not None:
            self._alone_setup()
        self.top_bid = self._top_bid()

    # --- the solution --------------------------------------------------------------------
    def at_tau(self, s, tau):
        """(b, phi, dphi/db) at tau in span s: phi and its slope for every group (G x len; a group
        that has stopped at its top value, with slope 0)."""
        tau = np.asarray(tau, float)
        L, c = self.spans[s]
        act = self.active[s]
        V, D = self._basis(tau, c.shape[1])
        phi = np.repeat(self.tops[:, None], tau.size, 1)
        dphi = np.zeros((self.G, tau.size))
        if s == 0:
            P, dP = c @ V.T, c @ D.T
            b = self.b0 + L * tau**self.q
            with np.errstate(divide="ignore", invalid="ignore"):
                dphi[act] = 1.0 + (P + tau * dP) / (self.q * tau ** (self.q - 1))
            phi[act] = b + L * tau * P
        else:
            b = self.starts[s] + L * tau
            phi[act] = b + c @ V.T
            dphi[act] = 1.0 + (c @ D.T) / L
        return b, phi, dphi

    def foc_residual(self, points=257):
        """The largest relative residual of the first-order conditions between the nodes:
        |d_i sum_k (n_k - [k = i]) x_k - 1| over the groups still bidding, x_k = phi_k' /
        (F_k / f_k)(phi_k) the rate at which a higher bid raises the chance to beat a group-k
        rival; zero in equilibrium."""
        tau = (np.arange(points) + 0.5) / points
        worst = 0.0
        for s in range(self.K):
            act = self.active[s]
            b, phi, dphi = self.at_tau(s, tau)
            phi, dphi = phi[act], dphi[act]
            d = phi - b
            with np.errstate(divide="ignore", invalid="ignore"):
                rho = np.array([self.groups[i].inverse_hazard_low(p) for i, p in zip(act, phi)])
                x = dphi / rho
                total = (self.n[act, None] * x).sum(0)
                r = d * (total[None, :] - x) - 1.0
            r = r[np.isfinite(r)]
            if not r.size:
                return math.inf
            worst = max(worst, float(np.max(np.abs(r))))
        return worst

    def kinks(self, i):
        """Group i's score values at which its win chance kinks: those bidding where a rival group
        stops, and where it starts to bid on alone."""
        out = []
        for s in range(self.K):
            after = self.active[s + 1] if s + 1 < self.K else ([self.alone] if self.alone is not None else [])
            if i in after:
                out.append(float(self.at_tau(s, np.array([1.0]))[1][i][0]))
        return out

    # --- above the spans: one group bidding on alone ------------------------------------------
    def _alone_setup(self):
        """Above the last stopping group's last bid beta the group left competes only within
        itself: a symmetric auction of n bidders in which the one at v* = phi(beta) bids beta, so
        b(w) = w - [int_v*^w F^(n - 1) + (v* - beta) F(v*)^(n - 1)] / F(w)^(n - 1) (the envelope
        theorem, Krishna 2009, ch. 2)."""
        self.v_star = float(self.at_tau(self.K - 1, np.array([1.0]))[1][self.alone][0])
        self.beta = self.span_top

    def _alone_bids(self, w):
        """The lone group's score bids at score values w >= v*: the integral of F^(n - 1) from v*
        to w by Gauss-Legendre on eight panels of equal probability (a long upper tail stays in
        the last ones)."""
        g, k = self.groups[self.alone], self.n[self.alone] - 1.0
        w = np.asarray(w, float)
        xi, wi = _GL32
        u0, u1 = float(g.cdf(self.v_star)), np.asarray(g.cdf(w), float)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            edges = g.at_quantile(u0 + (u1[:, None] - u0) * np.linspace(0.0, 1.0, 9)[None, :])
            edges[:, 0], edges[:, -1] = self.v_star, w
            half = 0.5 * np.diff(edges, axis=1)
            t = edges[:, :-1, None] + half[:, :, None] * (xi[None, None, :] + 1.0)
            area = (half[:, :, None] * wi[None, None, :] * g.cdf(t) ** k).sum((1, 2))
            return w - (area + (self.v_star - self.beta) * u0**k) / u1**k

    def _top_bid(self):
        if self.alone is None:
            return self.span_top
        g, top = self.groups[self.alone], self.tops[self.alone]
        if math.isfinite(top):
            return float(self._alone_bids(np.array([top]))[0])
        # no top: the bids rise to v* + int_v*^inf (1 - F^(n - 1)) - (v* - beta) F(v*)^(n - 1)
        k = self.n[self.alone] - 1.0
        rest = integrate.quad(lambda t: 1.0 - float(g.cdf(t)) ** k, self.v_star, np.inf, epsabs=1e-13 * self.scale,
                              epsrel=1e-12, limit=200)[0]
        return float(self.v_star + rest - (self.v_star - self.beta) * float(g.cdf(self.v_star)) ** k)

    def _tau_table(self, s):
        """Every group's inverse bid on 1,025 values of tau in span s, to start the inversion from."""
        if s not in self._table:
            tau = np.linspace(0.0, 1.0, 1025)
            self._table[s] = (tau, self.at_tau(s, tau)[1])
        return self._table[s]

    def _phi_i(self, s, i, tau):
        """(phi_i, d phi_i / d tau) at tau in span s, for group i alone (the inversion's inner loop)."""
        L, c = self.spans[s]
        coef = c[int(np.flatnonzero(self.active[s] == i)[0])]
        x = 2.0 * tau - 1.0
        val, der = cheb.chebval(x, coef), 2.0 * cheb.chebval(x, cheb.chebder(coef))
        if s == 0:
            return (self.b0 + L * tau**self.q + L * tau * val,
                    L * self.q * tau ** (self.q - 1) + L * (val + tau * der))
        return self.starts[s] + L * tau + val, L + der

    def _invert(self, s, i, w):
        """tau in span s at which phi_i = w: Newton's method from the table's linear reading (phi_i
        rises in tau). Where group i stops at the span's top, phi_i is flat there, w - phi_i
        falling like (1 - tau)^2: Newton's method then runs on sqrt(top - phi_i), which is
        straight there. Bisection for any left unsettled."""
        grid, table = self._tau_table(s)
        tau = np.interp(w, table[i], grid)
        flat = i in self.drops and self.drops.index(i) == s
        target = np.sqrt(np.maximum(self.tops[i] - w, 0.0)) if flat else w
        if flat:  # top - phi_i = a (1 - tau)^2 + ..., a from phi_i's second derivative at the top
            h = 1e-4
            a = max((2.0 * self.tops[i] - self._phi_i(s, i, np.array([1.0 - h]))[0][0]
                     - self._phi_i(s, i, np.array([1.0 - 2.0 * h]))[0][0]) / (5.0 * h * h), 1e-300)
        for _ in range(8):
            phi, slope = self._phi_i(s, i, tau)
            if flat:
                root = np.sqrt(np.maximum(self.tops[i] - phi, 0.0))
                with np.errstate(divide="ignore", invalid="ignore"):
                    phi, slope = root, np.where(root > 1e-8 * math.sqrt(self.scale), -slope / (2.0 * root), -math.sqrt(a))
            with np.errstate(divide="ignore", invalid="ignore"):
                step = np.where(slope != 0.0, (phi - target) / slope, 0.0)
            tau = np.clip(tau - step, 0.0, 1.0)
            if np.all(np.abs(step) <= 1e-13):
                break
        slow = np.abs(self._phi_i(s, i, tau)[0] - w) > 1e-13 * self.scale
        if slow.any():
            lo, hi = np.zeros(int(slow.sum())), np.ones(int(slow.sum()))
            for _ in range(60):
                mid = 0.5 * (lo + hi)
                below = self._phi_i(s, i, mid)[0] < w[slow]
                lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
            tau[slow] = 0.5 * (lo + hi)
        return tau

    def at_values(self, i, w):
        """(score bids, each group's inverse bid there: G x len) of group i's bidders at score
        values w (at or above the floor, at most the group's top)."""
        w = np.asarray(w, float)
        b, phi = np.empty(w.shape), np.empty((self.G, w.size))
        last = self._last_span(i)
        ends = np.array([self.at_tau(s, np.array([1.0]))[1][i][0] for s in range(last + 1)])
        span = np.minimum(np.searchsorted(ends, w), last)
        above = np.zeros(w.shape, bool) if i != self.alone else w > self.v_star
        for s in range(last + 1):
            here = (span == s) & ~above
            if here.any():
                tau = self._invert(s, i, w[here])
                b[here], phi[:, here], _ = self.at_tau(s, tau)
        if above.any():
            b[above] = self._alone_bids(w[above])
            phi[:, above] = self.tops[:, None]
            phi[self.alone, above] = w[above]
        return np.minimum(b, self.top_bid), phi

    def bids(self, i, w):
        """Group i's score bids at score values w in [floor, top]."""
        w = np.asarray(w, float)
        return self.at_values(i, w.ravel())[0].reshape(w.shape)
