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
where each group's density is positive at its top; the caller offers this solver only then.
"""
from __future__ import annotations

import functools
import math

import numpy as np
from numpy.polynomial import chebyshev as cheb
from scipy import linalg

from . import budget
from .errors import ParameterError

#: Collocation points per group, tried in turn until the residual of the first-order
#: conditions between the nodes is below FOC_TOLERANCE.
DEGREES = (24, 40, 64, 96)
FOC_TOLERANCE = 1e-9
#: A least-squares solution is taken (and judged by its residual between the nodes) when the
#: sum of squares of its collocation residuals is below this.
ACCEPT_COST = 1e-10
#: The largest residual of the first-order conditions between the nodes taken as a solution.
ACCEPT_RESIDUAL = 1e-6
#: At the fewest points a solution this close already tells which shape the equilibrium has.
SHAPE_RESIDUAL = 1e-2
_GL32 = np.polynomial.legendre.leggauss(32)


@functools.lru_cache(maxsize=16)
def _derivative_matrix(m):
    """The (m - 1) x m matrix taking Chebyshev coefficients of T_0..T_{m-1} to their derivative's."""
    return cheb.chebder(np.eye(m), axis=0)


class ScoreGroup:
    """One group in score space: scores W = m X, X from ``model`` (a forward value model with
    a top), ``count`` bidders."""

    def __init__(self, model, count, multiplier):
        self.model, self.count, self.m = model, int(count), float(multiplier)
        self.lower, self.top = self.m * model.lower, self.m * model.upper

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
    ``floor``, which every group's scores reach from at or below it."""

    def __init__(self, groups, floor):
        self.groups, self.b0 = groups, float(floor)
        self.G = len(groups)
        self.n = np.array([g.count for g in groups], float)
        self.N = self.n.sum()
        self.tops = np.array([g.top for g in groups])
        self.q = 2 if any(float(g.cdf(self.b0)) > 0.0 for g in groups) else 1
        self.scale = float(self.tops.max() - self.b0)
        self.c, self.residual = None, math.inf
        # Where each group's inverse bid ends at the top of the solved span: "top" (its top value,
        # at the common top bid), "drop" (its top value with zero bid density: it stops bidding
        # there while a stronger group of several bidders bids on alone) or "free".
        self.ends, self.drop = ["top"] * self.G, None
        modes = self._drop_candidates() + [None]
        # The shape (which group, if any, stops first) is chosen at the fewest points from straight
        # starting bids, where a solve is cheap, and then refined; a shape not found so is tried
        # once more from every start, with more points.
        for quick in (True, False):
            # the full pass tries the common top first: a shape the quick pass missed is more often
            # that one (a reserve cutting into the values makes it harder to start)
            for weak in (modes if quick else modes[::-1]):
                self._mode(weak)
                self._quick = quick
                if self._search(DEGREES[:1] if quick else DEGREES, SHAPE_RESIDUAL):
                    self._quick = False
                    found = (self.m, np.concatenate([[self.L], self.c.ravel()]), self.residual)
                    # refine from the shape found, with as many points at least
                    if not self._search([m for m in DEGREES if m >= found[0]]) or self.residual > found[2]:
                        self._set(found[0], found[1])
                        self.residual = found[2]
                        if self.residual > ACCEPT_RESIDUAL:
                            self.c = None
                            continue
                    break
            if self.c is not None:
                break
        if self.c is None:
            raise ParameterError("bidder_groups", "the first-price equilibrium of these groups was not found (offered "
                                                  "where every group bids up to one common top bid, or, with two "
                                                  "groups, where the weaker stops below the stronger's top bid); ask "
                                                  "for second price")
        if self.drop is not None:
            self._alone_setup()
        self.top_bid = self._top_bid()

    def _drop_candidates(self):
        """With two groups, the one that may stop bidding first: the one whose values end lower,
        against a group of several bidders (a lone rival above it would face no competition).
        Tried before the common top: where several bidders in the stronger group compete, it is
        the usual shape."""
        if self.G != 2 or self.tops[0] == self.tops[1]:
            return []
        weak = int(np.argmin(self.tops))
        return [weak] if self.n[1 - weak] >= 2 else []

    def _mode(self, weak):
        """Set the shape: every group to the common top (weak None), or group ``weak`` stopping first."""
        self.drop, self.c = weak, None
        self.ends = ["top"] * self.G if weak is None else ["drop" if i == weak else "free" for i in range(self.G)]

    def _search(self, degrees, accept=None):
        """Solve with each number of points in turn (warm from the last) until the residual between
        the nodes is small; keep the best solution that is an equilibrium (every inverse bid
        rising). True if one was found."""
        best = None
        for m in degrees:
            budget.check()
            x = self._solve(m)
            if x is None:
                continue
            self._set(m, x)
            if not self._rising():
                if best is None:  # a group's inverse bid falls: this shape of equilibrium is not the one
                    break
                continue
            res = self.foc_residual()
            if best is None or res < best[2]:
                best = (m, x, res)
            if res < FOC_TOLERANCE:
                break
        if best is None or best[2] > (ACCEPT_RESIDUAL if accept is None else accept):
            self.c = None
            return False
        self._set(best[0], best[1])
        self.residual = best[2]
        return True

    def _rising(self, points=257):
        """Whether every inverse bid rises on the solved span (an equilibrium; a least-squares
        solution with a group's inverse bid falling near the top says that group stops earlier)."""
        tau = (np.arange(points) + 0.5) / points
        _, _, dphi = self.at_tau(tau)
        return bool(np.all(dphi > -1e-9))

    # --- the variable tau: b = b0 + L tau^q --------------------------------------------
    def _basis(self, tau, m):
        """Chebyshev values and tau-derivatives of T_0..T_{m-1}(2 tau - 1)."""
        x = 2.0 * np.asarray(tau, float) - 1.0
        V = cheb.chebvander(x, m - 1)
        return V, 2.0 * V[:, : m - 1] @ _derivative_matrix(m)

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
        with a density at the floor), then each group's symmetric inverse bid function,
        stretched so that its top bid is a common one, at the groups' symmetric top bids in turn."""
        for share in (None, 0.25, 0.8):
            yield self._guess(m, share)
        if getattr(self, "_quick", False):
            return
        tau = 0.5 - 0.5 * np.cos((np.arange(m) + 0.5) * np.pi / m)
        V = self._basis(tau, m)[0]
        grids, tops = [], []
        for grp in self.groups:
            w = self.b0 + (grp.top - self.b0) * (0.5 - 0.5 * np.cos(np.linspace(0.0, np.pi, 201)))
            b = self._symmetric(grp, w)
            grids.append((w, b))
            tops.append(b[-1])
        tops = np.array(tops)
        for top in (float(np.mean(tops)), float(np.min(tops)), float(np.max(tops)), float(np.median(tops))):
            L = top - self.b0
            if not L > 0.0:
                continue
            bb = self.b0 + L * tau**self.q
            c = np.zeros((self.G, m))
            for i, ((w, b), t_i) in enumerate(zip(grids, tops)):
                phi = np.interp(self.b0 + (bb - self.b0) * (t_i - self.b0) / L, b, w)
                c[i] = np.linalg.solve(V, (phi - bb) / (L * tau))
            yield np.concatenate([[L], c.ravel()])

    def _guess(self, m, share):
        """Straight inverse bids meeting the tops at a top bid ``share`` of the way from the floor
        to the lowest top (None: (N - 1)/N, as in a symmetric auction of uniform values)."""
        L = float(np.min(self.tops - self.b0)) * ((self.N - 1.0) / self.N if share is None else share)
        ends = self.tops.copy()
        if self.drop is not None:
            # where the weaker group stops, its zero bid density asks of the stronger group's
            # markdown d_S = n_S / (n_S - 1) d_W (its first-order condition at that bid)
            w, a = self.drop, 1 - self.drop
            d_w = self.tops[w] - (self.b0 + L)
            ends[a] = self.b0 + L + self.n[a] / (self.n[a] - 1.0) * d_w
        c = np.zeros((self.G, m))
        with np.errstate(all="ignore"):
            c[:, 0] = (ends - self.b0 - L) / L
        return np.concatenate([[L], c.ravel()])

    def _equations(self, x, tau, V, D, V1, jac, D1=None):
        G, m = self.G, V.shape[1]
        L, c = x[0], x[1:].reshape(G, m)
        D1 = self._D1
        P, dP = c @ V.T, c @ D.T
        g = tau**self.q
        beta = self.q * tau ** (self.q - 1)  # d(b - b0)/dtau / L
        d = L * tau * P
        e = (P + tau * dP) / beta  # d d_i / db
        phi = self.b0 + L * g + d
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            S = (self.n[:, None] / d).sum(0) / (self.N - 1.0)
            rho = np.array([grp.inverse_hazard_low(p) for grp, p in zip(self.groups, phi)])
            A = d * (1.0 + e) - rho * (d * S - 1.0)
        ends = []
        for i, kind in enumerate(self.ends):
            if kind in ("top", "drop"):
                ends.append((self.b0 + L * (1.0 + c[i] @ V1) - self.tops[i]) / self.scale)
            if kind == "drop":
                ends.append(1.0 + (c[i] @ (V1 + D1)) / self.q)  # phi_i'(top of span) = 0
        F = np.concatenate([(A / L).ravel(), np.array(ends)])
        ok = bool(L > 0.0 and np.all(d > 0.0) and np.all(np.isfinite(F)))
        if not jac:
            return F, ok
        h = 1e-7 * self.scale
        with np.errstate(divide="ignore", invalid="ignore"):
            drho = np.array([(grp.inverse_hazard_low(p + h) - grp.inverse_hazard_low(p - h)) / (2 * h)
                             for grp, p in zip(self.groups, phi)])
            dA_dd = (1.0 + e) - rho * (S - self.n[:, None] / ((self.N - 1.0) * d)) - drho * (d * S - 1.0)
            cross = rho * d / (self.N - 1.0)  # times n_k / d_k^2 for group k
        J = np.zeros((F.size, 1 + G * m))
        dd_dc = (L * tau)[:, None] * V
        de_dc = (V + tau[:, None] * D) / beta[:, None]
        for i in range(G):
            rows = slice(i * m, (i + 1) * m)
            dA_dL = dA_dd[i] * tau * P[i] - drho[i] * (d[i] * S - 1.0) * g
            for k in range(G):
                cols = slice(1 + k * m, 1 + (k + 1) * m)
                if k == i:
                    J[rows, cols] = (dA_dd[i][:, None] * dd_dc + d[i][:, None] * de_dc) / L
                else:
                    w = cross[i] * self.n[k] / d[k] ** 2
                    J[rows, cols] = w[:, None] * dd_dc / L
                    dA_dL = dA_dL + w * tau * P[k]
            J[rows, 0] = dA_dL / L - A[i] / L**2
        row = G * m
        for i, kind in enumerate(self.ends):
            cols = slice(1 + i * m, 1 + (i + 1) * m)
            if kind in ("top", "drop"):
                J[row, 0] = (1.0 + c[i] @ V1) / self.scale
                J[row, cols] = L * V1 / self.scale
                row += 1
            if kind == "drop":
                J[row, cols] = (V1 + D1) / self.q
                row += 1
        return F, ok, J

    def _solve(self, m):
        tau = 0.5 - 0.5 * np.cos((np.arange(m) + 0.5) * np.pi / m)
        V, D = self._basis(tau, m)
        V1, D1 = (row[0] for row in self._basis(np.array([1.0]), m))
        self._D1 = D1
        for start in ([self._warm(m)] if self.c is not None else self._starts(m)):
            x = self._newton(start, tau, V, D, V1)
            if x is not None:
                return x
        return None

    def _newton(self, x, tau, V, D, V1):
        with np.errstate(all="ignore"):  # a failed start is a None, not a warning
            return self._newton_steps(x, tau, V, D, V1)

    def _newton_steps(self, x, tau, V, D, V1):
        F, ok = self._equations(x, tau, V, D, V1, jac=False)
        if not ok:
            return None
        cost = float(F @ F)
        slow = 0
        for _ in range(40):
            budget.check()
            F, ok, J = self._equations(x, tau, V, D, V1, jac=True)
            step = linalg.lstsq(J, -F, lapack_driver="gelsy", check_finite=False)[0]
            t = 1.0
            while t > 1e-8:
                trial = x + t * step
                Fn, ok = self._equations(trial, tau, V, D, V1, jac=False)
                cn = float(Fn @ Fn) if ok else math.inf
                if cn < cost or cn < 1e-30:
                    break
                t *= 0.5
            else:
                break
            small = np.max(np.abs(t * step)) <= 1e-14 * max(1.0, np.max(np.abs(x)))
            slow = slow + 1 if cn > 0.97 * cost and cn > ACCEPT_COST else 0
            x, cost = trial, cn
            if small or cost < 1e-30 or slow >= 8:  # converged, or crawling towards no solution
                break
        # A converged least-squares solution whose collocation residuals are small; whether it
        # is accurate enough is the residual between the nodes' to say (foc_residual).
        return x if cost < ACCEPT_COST else None

    def _warm(self, m):
        """The last solution's coefficients, cut or padded to m terms."""
        c = np.zeros((self.G, m))
        k = min(m, self.m)
        c[:, :k] = self.c[:, :k]
        return np.concatenate([[self.L], c.ravel()])

    def _set(self, m, x):
        self.m, self.L, self.c = m, float(x[0]), x[1:].reshape(self.G, m).copy()
        self.span_top = self.b0 + self.L

    # --- the solution --------------------------------------------------------------------
    def at_tau(self, tau):
        """(b, phi (G x len), dphi/db) at tau."""
        tau = np.asarray(tau, float)
        V, D = self._basis(tau, self.m)
        P, dP = self.c @ V.T, self.c @ D.T
        b = self.b0 + self.L * tau**self.q
        with np.errstate(divide="ignore", invalid="ignore"):
            dphi = 1.0 + (P + tau * dP) / (self.q * tau ** (self.q - 1))
        return b, b + self.L * tau * P, dphi

    def foc_residual(self, points=257):
        """The largest relative residual of the first-order conditions between the nodes:
        |d_i sum_k (n_k - [k = i]) x_k - 1|, x_k = phi_k' / (F_k / f_k)(phi_k) the rate at which
        a higher bid raises the chance to beat a group-k rival; zero in equilibrium."""
        tau = (np.arange(points) + 0.5) / points
        b, phi, dphi = self.at_tau(tau)
        d = phi - b
        with np.errstate(divide="ignore", invalid="ignore"):
            rho = np.array([grp.inverse_hazard_low(p) for grp, p in zip(self.groups, phi)])
            x = dphi / rho
            total = (self.n[:, None] * x).sum(0)
            r = d * (total[None, :] - x) - 1.0
        r = r[np.isfinite(r)]
        return float(np.max(np.abs(r))) if r.size else math.inf

    def phi_at(self, tau):
        """(b, phi (G x len)) at tau: the bids and each group's value bidding them."""
        tau = np.asarray(tau, float)
        P = self.c @ cheb.chebvander(2.0 * tau - 1.0, self.m - 1).T
        b = self.b0 + self.L * tau**self.q
        return b, b + self.L * tau * P

    # --- above the span: the stronger group alone (two groups, the weaker stopped) ------------
    def _alone_setup(self):
        """Above the weaker group's last bid beta the stronger group's bidders compete only among
        themselves: a symmetric auction of n_S bidders in which the one at v* = phi_S(beta) bids
        beta, so b(w) = w - [int_v*^w F_S^(n_S - 1) + (v* - beta) F_S(v*)^(n_S - 1)] / F_S(w)^(n_S - 1)
        (the envelope theorem, Krishna 2009, ch. 2)."""
        self.alone = 1 - self.drop
        _, phi = self.phi_at(np.array([1.0]))
        self.v_star, self.beta = float(phi[self.alone][0]), self.span_top

    def _alone_bids(self, w):
        """The stronger group's score bids at score values w >= v*."""
        g, k = self.groups[self.alone], self.n[self.alone] - 1.0
        w = np.asarray(w, float)
        xi, wi = _GL32
        half = 0.5 * (w - self.v_star)
        t = self.v_star + half[:, None] * (xi[None, :] + 1.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            area = (half[:, None] * wi[None, :] * g.cdf(t) ** k).sum(1)
            return w - (area + (self.v_star - self.beta) * float(g.cdf(self.v_star)) ** k) / g.cdf(w) ** k

    def _top_bid(self):
        if self.drop is None:
            return self.span_top
        return float(self._alone_bids(np.array([self.tops[self.alone]]))[0])

    def _tau_table(self):
        """Each group's inverse bid on 2,049 values of tau, to start the inversion from."""
        if getattr(self, "_table", None) is None or self._table[0] != self.m:
            tau = np.linspace(0.0, 1.0, 2049)
            self._table = (self.m, tau, self.phi_at(tau)[1])
        return self._table[1], self._table[2]

    def at_values(self, i, w):
        """(score bids, each group's inverse bid there: G x len) of group i's bidders at score
        values w (at or above the floor, at most the group's top): phi_i(tau) = w by Newton's
        method from the table's linear reading (phi_i rises in tau)."""
        w = np.asarray(w, float)
        above = np.zeros(w.shape, bool) if self.drop is None or i != self.alone else w > self.v_star
        grid, table = self._tau_table()
        tau = np.interp(w, table[i], grid)
        for _ in range(6):
            b, phi, dphi = self.at_tau(tau)
            slope = dphi[i] * self.L * self.q * np.maximum(tau, 1e-300) ** (self.q - 1)  # d phi_i / d tau
            with np.errstate(divide="ignore", invalid="ignore"):
                step = np.where(slope > 0.0, (phi[i] - w) / slope, 0.0)
            tau = np.clip(tau - step, 0.0, 1.0)
            if np.all(np.abs(step) <= 1e-15):
                break
        b, phi = self.phi_at(tau)
        # Where phi_i is flat (a group stopping with zero bid density) Newton creeps: bisect there.
        slow = np.abs(phi[i] - w) > 1e-14 * self.scale
        if slow.any():
            lo, hi = np.zeros(int(slow.sum())), np.ones(int(slow.sum()))
            for _ in range(60):
                mid = 0.5 * (lo + hi)
                below = self.phi_at(mid)[1][i] < w[slow]
                lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
            b[slow], phi[:, slow] = self.phi_at(0.5 * (lo + hi))
        if above.any():
            b[above] = self._alone_bids(w[above])
            phi[:, above] = self.tops[:, None]
            phi[self.alone, above] = w[above]
        return np.minimum(b, self.top_bid), phi

    def bids(self, i, w):
        """Group i's score bids at score values w in [floor, top]."""
        w = np.asarray(w, float)
        return self.at_values(i, w.ravel())[0].reshape(w.shape)
