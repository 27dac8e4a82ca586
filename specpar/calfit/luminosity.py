"""The per-class maximum-likelihood fit: M_V(type), its intrinsic scatter and a
second luminosity-function component, from parallaxes of a magnitude-limited
sample, with smoothing penalties and curvature-based uncertainties.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .likelihood import OUTLIER_WIDTH, mixture_summary, star_loglike
from .sample import NEAR_SUBTYPES
from .smoothing import covariance_from_curvature, hat_matrix, second_diff

__all__ = ["LuminosityFit", "fit_luminosity"]

#: Normal prior (centre, sd) on logit(frac) of the second component at each scatter node:
#: centred on 10% (common practice: a tenth of catalogue types off by a class or binary).
FRAC_PRIOR = (np.log(0.1 / 0.9), 1.5)
#: Weak normal priors (centre, sd) on the second component's offset (mag) and log extra width.
GLOBAL_PRIOR = np.array([[0.0, 2.0], [np.log(OUTLIER_WIDTH), 0.7]])
#: Starting values: scatter 0.5 mag, second component 0.3 mag fainter (common practice).
START_SIG, START_SHIFT = 0.5, 0.3
#: Parallax S/N above which a star's trigonometric M_V helps choose the starting values.
START_SNR = 5.0
#: Fewest well-measured stars near a node for their median to start that node.
START_MIN_STARS = 3
#: Stars within this many subtypes of a node count as of its type (the ``n_stars`` column).
SAME_TYPE = 0.5
#: Bounds: M_V (mag), scatter (mag), logit(frac), offset (mag), extra width (mag).
MV_BOUNDS, SIG_BOUNDS, LOGIT_FRAC_BOUNDS = (-12.0, 18.0), (0.03, 3.0), (-6.0, 0.0)
SHIFT_BOUNDS, WIDTH_BOUNDS = (-4.0, 4.0), (0.2, 4.0)
#: Stop when an iteration changes the penalised log-likelihood by < ~1e-8 relative (about
#: 1e-4 for 10^4 stars), far below what moves a table value.
OPTIMIZER_OPTIONS = {"maxiter": 3000, "maxfun": 6000, "maxcor": 30, "ftol": 1e-8}


@dataclass
class LuminosityFit:
    """Result of :func:`fit_luminosity`, at the nodes.

    ``M_V``/``sig_M_V`` summarise the fitted luminosity function by its median and
    half its 16-84% range; ``M_core``/``sig_core`` are the core Gaussian;
    ``frac``, ``shift``, ``width`` describe the second component.
    """

    nodes: np.ndarray
    M_V: np.ndarray
    e_M_V: np.ndarray
    sig_M_V: np.ndarray
    e_sig_M_V: np.ndarray
    M_core: np.ndarray
    sig_core: np.ndarray
    frac: np.ndarray
    shift: float
    width: float
    n_stars: np.ndarray
    converged: bool
    message: str
    neg_loglike: float
    theta: np.ndarray = None


def _initial_mv(x, m0, plx, e_plx, nodes):
    """Median trigonometric M_V of well-measured stars near each node (overall median elsewhere)."""
    good = plx > START_SNR * e_plx
    mtrig = m0 + 5 + 5 * np.log10(np.where(good, plx, 1.0) / 1000.0)
    init = np.full(len(nodes), np.median(mtrig[good]) if good.any() else np.median(m0) - 5)
    for j, xn in enumerate(nodes):
        sel = good & (np.abs(x - xn) <= NEAR_SUBTYPES)
        if sel.sum() >= START_MIN_STARS:
            init[j] = np.median(mtrig[sel])
    return init


class _Problem:
    """The penalised negative log-likelihood of one class: M_V on ``nodes``; log sig and
    logit(frac) on coarser scatter nodes; offset and log width of the second component."""

    def __init__(self, x, m0, plx, e_plx, inv_h, extra_var, nodes, smooth_mv, smooth_logsig, sig_node_step):
        self.data = (m0, plx, e_plx)
        self.inv_h, self.extra_var, self.nodes = inv_h, extra_var, nodes
        nsig = max(2, int(np.ceil((nodes[-1] - nodes[0]) / sig_node_step)) + 1)
        self.snodes = np.linspace(nodes[0], nodes[-1], nsig)
        self.WM, self.WS = hat_matrix(x, nodes), hat_matrix(x, self.snodes)
        D2m, D2s = second_diff(len(nodes)), second_diff(nsig)
        # penalty per subtype^2: second differences scale with the node spacing squared
        hm = np.diff(nodes).mean() ** 2 * smooth_mv
        hs = np.diff(self.snodes).mean() ** 2 * smooth_logsig
        self.Pm, self.Ps = D2m.T @ D2m / hm ** 2, D2s.T @ D2s / hs ** 2
        self.J, self.K = len(nodes), nsig

    def start(self, init_mv):
        K = self.K
        return np.concatenate([np.asarray(init_mv, float), np.full(K, np.log(START_SIG)),
                               np.full(K, FRAC_PRIOR[0]), GLOBAL_PRIOR[:, 0] + [START_SHIFT, 0.0]])

    def bounds(self):
        J, K = self.J, self.K
        return ([MV_BOUNDS] * J + [tuple(np.log(SIG_BOUNDS))] * K + [LOGIT_FRAC_BOUNDS] * K
                + [SHIFT_BOUNDS, tuple(np.log(WIDTH_BOUNDS))])

    def split(self, th):
        J, K = self.J, self.K
        return th[:J], th[J:J + K], th[J + K:J + 2 * K], th[J + 2 * K:]

    def star_terms(self, th):
        """Per-star log-likelihoods and derivatives, and the scatter per star (sig, sig_t)."""
        mv, ls, lf, gp = self.split(th)
        M0 = self.WM @ mv
        sig = np.exp(self.WS @ ls)
        f = 1.0 / (1.0 + np.exp(-(self.WS @ lf)))
        sig_t = np.sqrt(sig ** 2 + self.extra_var)
        m0, plx, e_plx = self.data
        return star_loglike(m0, plx, e_plx, M0, sig_t, f, self.inv_h, gp[0], np.exp(gp[1])), sig, sig_t

    def __call__(self, th):
        """Value and gradient of the penalised negative log-likelihood."""
        mv, ls, lf, gp = self.split(th)
        (ll, dm, ds, dphi, dsh, dlw), sig, sig_t = self.star_terms(th)
        zg = (gp - GLOBAL_PRIOR[:, 0]) / GLOBAL_PRIOR[:, 1]
        zf = (lf - FRAC_PRIOR[0]) / FRAC_PRIOR[1]
        Pm, Ps, WM, WS = self.Pm, self.Ps, self.WM, self.WS
        val = (-ll.sum() + 0.5 * mv @ Pm @ mv + 0.5 * ls @ Ps @ ls + 0.5 * lf @ Ps @ lf
               + 0.5 * zg @ zg + 0.5 * zf @ zf)
        g = np.concatenate([-(WM.T @ dm) + Pm @ mv, -(WS.T @ (ds * sig ** 2 / sig_t)) + Ps @ ls,
                            -(WS.T @ dphi) + Ps @ lf + zf / FRAC_PRIOR[1],
                            -np.array([dsh.sum(), dlw.sum()]) + zg / GLOBAL_PRIOR[:, 1]])
        return val, g

    def curvature(self, th):
        """Outer product of the per-star gradients (Berndt, Hall, Hall & Hausman 1974), equal
        to the Hessian at the maximum for a correct model, plus the penalty and prior terms."""
        from scipy.sparse import csr_matrix, diags, hstack
        (_, dm, ds, dphi, dsh, dlw), sig, sig_t = self.star_terms(th)
        G = hstack([diags(dm) @ self.WM, diags(ds * sig ** 2 / sig_t) @ self.WS, diags(dphi) @ self.WS,
                    csr_matrix(np.stack([dsh, dlw], axis=1))]).tocsr()
        H = (G.T @ G).toarray()
        n, J, K = len(th), self.J, self.K
        H[:J, :J] += self.Pm
        H[J:J + K, J:J + K] += self.Ps
        H[J + K:J + 2 * K, J + K:J + 2 * K] += self.Ps + np.eye(K) / FRAC_PRIOR[1] ** 2
        H[n - 2:, n - 2:] += np.diag(1.0 / GLOBAL_PRIOR[:, 1] ** 2)
        return H

    def minimise(self, theta0):
        from scipy.optimize import minimize
        bounds = self.bounds()
        res = minimize(self, theta0, jac=True, method="L-BFGS-B", bounds=bounds, options=OPTIMIZER_OPTIONS)
        if not res.success:  # a line search stopped by quadrature noise: restart once from there
            res = minimize(self, res.x, jac=True, method="L-BFGS-B", bounds=bounds, options=OPTIMIZER_OPTIONS)
        return res

    def result(self, res, x) -> LuminosityFit:
        """The fit at the nodes, with uncertainties from the curvature."""
        th, nodes, J, K = res.x, self.nodes, self.J, self.K
        cov = covariance_from_curvature(self.curvature(th))
        mv, ls, lf, gp = self.split(th)
        shift, width = gp[0], np.exp(gp[1])
        Wn = hat_matrix(nodes, self.snodes).toarray()
        sig_nodes = np.exp(Wn @ ls)
        frac = 1.0 / (1.0 + np.exp(-(Wn @ lf)))
        cs = cov[J:J + K, J:J + K]
        e_ls = np.sqrt(np.clip(np.einsum("ij,jk,ik->i", Wn, cs, Wn), 0, None))
        med, sig_eff = mixture_summary(mv, sig_nodes, frac, shift, width)
        n_stars = np.array([int(np.sum(np.abs(x - xn) <= SAME_TYPE)) for xn in nodes])
        # uncertainties of the summaries: those of the core node values (the mixture
        # parameters are shared by all types and much better determined)
        return LuminosityFit(nodes, med, np.sqrt(np.clip(np.diag(cov)[:J], 0, None)), sig_eff,
                             sig_eff * e_ls, mv, sig_nodes, frac, float(shift), float(width), n_stars,
                             bool(res.success), str(res.message), float(res.fun), th)


def fit_luminosity(sptnum, m0, plx, e_plx, *, nodes=None, inv_h=0.0, extra_var=0.0, smooth_mv=0.15,
                   smooth_logsig=0.1, sig_node_step=5.0, init_mv=None, theta_init=None) -> LuminosityFit:
    """Maximum-likelihood M_V(type) and intrinsic scatter from parallaxes of a magnitude-limited sample.

    The likelihood of each star is that of its observed parallax given its
    extinction-corrected apparent magnitude ``m0`` (Ratnatunga & Casertano 1991),
    the true distance integrated out under the space density and the luminosity
    function: selection on apparent magnitude and direction (Malmquist bias)
    drops out, and integrating over the true parallax with its Gaussian error
    (negative and zero parallaxes included) treats the Lutz-Kelker bias.

    The luminosity function at type x is a core N(M(x), sig(x)^2) plus a second
    component N(M(x) + shift, sig(x)^2 + width^2) with fraction ``frac``
    (varying with type like sig; ``shift`` and ``width`` per class). The table
    values are its median and half its 16-84% range. M(x) is piecewise linear on
    ``nodes`` (default one per subtype), log sig on nodes every
    ``sig_node_step`` subtypes; both are smoothed by a normal prior of width
    ``smooth_mv`` mag (``smooth_logsig``) per subtype^2 on their second
    differences. Uncertainties come from the curvature of the penalised
    negative log-likelihood.

    Parameters
    ----------
    sptnum, m0, plx, e_plx : array_like
        Numeric type, apparent V corrected for extinction, parallax and error (mas).
    inv_h : float or array_like
        |sin b| / scale height (1/pc) of an exponential disk; 0 for a uniform density.
    extra_var : float or array_like
        Known per-star variance (mag^2) added to the core's (the subtype and
        reddening uncertainty :func:`specpar.estimate` adds itself).

    References
    ----------
    Ratnatunga, K. U. & Casertano, S. 1991, AJ 101, 1075; Malmquist, K. G. 1922,
    Lund Medd. I 100; Lutz, T. E. & Kelker, D. H. 1973, PASP 85, 573; Whittaker,
    E. T. 1923, Proc. Edinburgh Math. Soc. 41, 63; Eilers, P. H. C. & Marx, B. D.
    1996, Stat. Sci. 11, 89 (all from memory).
    """
    x = np.asarray(sptnum, dtype=float)
    m0, plx, e_plx = (np.asarray(a, dtype=float) for a in (m0, plx, e_plx))
    inv_h = np.broadcast_to(np.asarray(inv_h, dtype=float), x.shape).copy()
    extra_var = np.broadcast_to(np.asarray(extra_var, dtype=float), x.shape).copy()
    nodes = np.arange(np.floor(x.min()), np.ceil(x.max()) + 1.0) if nodes is None else nodes
    nodes = np.asarray(nodes, dtype=float)
    if len(nodes) < 2:
        nodes = np.array([nodes[0] - 1.0, nodes[0] + 1.0])
    problem = _Problem(x, m0, plx, e_plx, inv_h, extra_var, nodes, smooth_mv, smooth_logsig, sig_node_step)
    theta0 = problem.start(_initial_mv(x, m0, plx, e_plx, nodes) if init_mv is None else init_mv)
    if theta_init is not None and len(theta_init) == len(theta0):
        theta0 = np.asarray(theta_init, dtype=float).copy()
    return problem.result(problem.minimise(theta0), x)
