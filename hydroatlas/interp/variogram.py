"""Variogram models, the experimental variogram and its weighted least-squares fit.

Conventions (SPEC section 6): ``nugget`` is the nugget, ``sill`` the total
sill (nugget plus partial sill), ``range`` the practical range:

- spherical: ``nugget + (sill - nugget) * (1.5 h/a - 0.5 (h/a)^3)`` for h < a, ``sill`` beyond;
- exponential: ``nugget + (sill - nugget) * (1 - exp(-3 h / a))``;
- gaussian: ``nugget + (sill - nugget) * (1 - exp(-3 h^2 / a^2))``;

and gamma(0) = 0 for every model (the nugget is a jump just after zero).
Optional geometric anisotropy: ``angle`` is the azimuth of the major axis in
degrees clockwise from north (the +y axis), ``ratio`` the minor/major range
ratio in (0, 1]; distances are measured after rotating and stretching
coordinates so that the model becomes isotropic with the major range.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares
from scipy.spatial.distance import pdist

from ..errors import InsufficientDataError, ParameterError
from ._validate import as_points, as_values

MODELS = ("spherical", "exponential", "gaussian")
MODEL_CODES = {name: i for i, name in enumerate(MODELS)}


def gamma_values(h, model: str, nugget: float, sill: float, range_: float) -> np.ndarray:
    """Evaluate a variogram model at lag distances ``h`` (any shape), gamma(0) = 0."""
    h = np.asarray(h, dtype=float)
    psill = sill - nugget
    r = h / range_
    if model == "spherical":
        core = np.where(r < 1.0, 1.5 * r - 0.5 * r**3, 1.0)
    elif model == "exponential":
        core = 1.0 - np.exp(-3.0 * r)
    elif model == "gaussian":
        core = 1.0 - np.exp(-3.0 * r * r)
    else:
        raise ParameterError(f"unknown variogram model {model!r}; expected one of {', '.join(MODELS)}")
    return np.where(h > 0, nugget + psill * core, 0.0)


@dataclass(frozen=True)
class ExperimentalVariogram:
    """Binned semivariances: lag centres (mean pair distance per bin), gamma, pair counts."""

    lags: np.ndarray
    gamma: np.ndarray
    counts: np.ndarray
    max_lag: float

    def to_dict(self) -> dict:
        return {"lags": self.lags.tolist(), "gamma": self.gamma.tolist(), "counts": self.counts.tolist(),
                "max_lag": self.max_lag}


@dataclass(frozen=True)
class Variogram:
    """A variogram model (see the module docstring for the conventions).

    Parameters
    ----------
    model : {'spherical', 'exponential', 'gaussian'}
    nugget : float, >= 0
    sill : float, >= nugget (total sill)
    range : float, > 0 (practical range, in the units of the coordinates)
    angle : float, degrees clockwise from north of the major axis (anisotropy)
    ratio : float in (0, 1], minor/major range ratio (1 = isotropic)

    Examples
    --------
    >>> v = Variogram("exponential", nugget=0.0, sill=10.0, range=10.0)
    >>> round(float(v(10.0)), 4)
    9.5021
    """

    model: str
    nugget: float = 0.0
    sill: float = 1.0
    range: float = 1.0
    angle: float = 0.0
    ratio: float = 1.0
    experimental: ExperimentalVariogram | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        if self.model not in MODELS:
            raise ParameterError(f"The 'model' parameter of Variogram must be one of {', '.join(MODELS)}. "
                                 f"Got {self.model!r} instead.")
        for name in ("nugget", "sill", "range", "angle", "ratio"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float, np.floating)) and math.isfinite(value)):
                raise ParameterError(f"The '{name}' parameter of Variogram must be a finite number. "
                                     f"Got {value!r} instead.")
            object.__setattr__(self, name, float(value))
        if self.nugget < 0:
            raise ParameterError(f"The 'nugget' parameter of Variogram must be >= 0. Got {self.nugget} instead.")
        if self.sill < self.nugget or self.sill <= 0:
            raise ParameterError(f"The 'sill' parameter of Variogram must be > 0 and >= the nugget. "
                                 f"Got sill={self.sill}, nugget={self.nugget} instead.")
        if self.range <= 0:
            raise ParameterError(f"The 'range' parameter of Variogram must be > 0. Got {self.range} instead.")
        if not 0 < self.ratio <= 1:
            raise ParameterError(f"The 'ratio' parameter of Variogram must be in (0, 1]. Got {self.ratio} instead.")

    @property
    def partial_sill(self) -> float:
        return self.sill - self.nugget

    @property
    def code(self) -> int:
        return MODEL_CODES[self.model]

    def __call__(self, h) -> np.ndarray:
        """Semivariance at lag distance(s) ``h`` (isotropic distances)."""
        return gamma_values(h, self.model, self.nugget, self.sill, self.range)

    def covariance(self, h) -> np.ndarray:
        """C(h) = sill - gamma(h); C(0) = sill."""
        return self.sill - self(h)

    def to_isotropic(self, xy) -> np.ndarray:
        """Coordinates rotated and stretched so that distances are isotropic (identity when ratio = 1)."""
        xy = np.asarray(xy, dtype=float)
        if self.ratio == 1.0:
            return xy
        theta = math.radians(self.angle)
        # unit vectors of the major (azimuth theta from +y, clockwise) and minor axes
        major = np.array([math.sin(theta), math.cos(theta)])
        minor = np.array([math.cos(theta), -math.sin(theta)])
        return np.column_stack([xy @ major, (xy @ minor) / self.ratio])

    def to_dict(self) -> dict:
        out = {"model": self.model, "nugget": self.nugget, "sill": self.sill, "range": self.range,
               "angle": self.angle, "ratio": self.ratio}
        if self.experimental is not None:
            out["experimental"] = self.experimental.to_dict()
        return out

    # -- estimation ---------------------------------------------------------
    @staticmethod
    def experimental_from(xy, z, *, n_lags: int = 12, max_lag: float | None = None, angle: float = 0.0,
                          ratio: float = 1.0, max_pairs: int = 2_000_000, seed: int = 0) -> ExperimentalVariogram:
        """Experimental semivariogram: mean of (z_i - z_j)^2 / 2 per lag bin.

        Lags are ``n_lags`` equal bins up to ``max_lag`` (default: half the largest
        pair distance, common practice). Above ``max_pairs`` pairs a fixed-seed
        random sample of pairs is used.
        """
        xy = as_points(xy)
        z = as_values(z, len(xy))
        if len(xy) < 3:
            raise InsufficientDataError(f"an experimental variogram needs at least 3 points; got {len(xy)}")
        pts = Variogram("spherical", 0.0, 1.0, 1.0, angle, ratio).to_isotropic(xy)
        n = len(pts)
        if n * (n - 1) // 2 <= max_pairs:
            d = pdist(pts)
            dz = pdist(z[:, None], "sqeuclidean")
        else:
            rng = np.random.default_rng(seed)
            i = rng.integers(0, n, max_pairs)
            j = rng.integers(0, n, max_pairs)
            keep = i != j
            i, j = i[keep], j[keep]
            d = np.hypot(*(pts[i] - pts[j]).T)
            dz = (z[i] - z[j]) ** 2
        if max_lag is None:
            max_lag = 0.5 * float(d.max())
        if not max_lag > 0:
            raise InsufficientDataError("all points are at one location; no variogram can be computed")
        edges = np.linspace(0.0, max_lag, n_lags + 1)
        which = np.digitize(d, edges) - 1
        inside = (which >= 0) & (which < n_lags) & (d > 0)
        counts = np.bincount(which[inside], minlength=n_lags)
        sums = np.bincount(which[inside], weights=0.5 * dz[inside], minlength=n_lags)
        dsum = np.bincount(which[inside], weights=d[inside], minlength=n_lags)
        ok = counts > 0
        return ExperimentalVariogram(dsum[ok] / counts[ok], sums[ok] / counts[ok], counts[ok], float(max_lag))

    @classmethod
    def fit(cls, xy, z, model: str = "spherical", *, n_lags: int = 12, max_lag: float | None = None,
            nugget: float | None = None, angle: float = 0.0, ratio: float = 1.0) -> "Variogram":
        """Fit ``model`` to the experimental variogram by weighted least squares.

        Weights follow Cressie (1985): each lag counts by its number of pairs
        over the squared model value, so short, well-populated lags weigh most.
        A given ``nugget`` is held fixed. Raises InsufficientDataError when the
        values do not vary (nothing to fit).
        """
        if model not in MODELS:
            raise ParameterError(f"unknown variogram model {model!r}; expected one of {', '.join(MODELS)}")
        z = np.asarray(z, dtype=float)
        if z.size and np.ptp(z) <= 1e-12 * float(np.max(np.abs(z))):
            raise InsufficientDataError("all values are equal: no variogram can be fitted "
                                        "(use IDW, or fix the variogram parameters)")
        # fit in units of the data's standard deviation, so the result does not depend on the unit of z
        unit = float(np.std(z)) or 1.0
        z = z / unit
        nugget = None if nugget is None else nugget / unit**2
        exp = cls.experimental_from(xy, z, n_lags=n_lags, max_lag=max_lag, angle=angle, ratio=ratio)
        if len(exp.lags) < 3:
            raise InsufficientDataError(f"only {len(exp.lags)} lag bins hold pairs; at least 3 are needed to fit")
        h, g, w = exp.lags, exp.gamma, exp.counts.astype(float)
        gmax = float(g.max())
        var_z = float(np.var(z, ddof=1))
        scale = max(gmax, var_z, 1e-300)
        fixed_nugget = nugget is not None

        def unpack(p):
            if fixed_nugget:
                return nugget, p[0], p[1]
            return p[0], p[1], p[2]

        def residuals(p):
            nug, psill, rng_ = unpack(p)
            model_g = gamma_values(h, model, nug, nug + psill, rng_)
            return np.sqrt(w) * (g - model_g) / np.maximum(model_g, 1e-12 * scale)

        lo_r, hi_r = max(h.min() * 0.1, 1e-12), exp.max_lag * 3.0
        start = [0.5 * var_z if var_z > 0 else gmax, exp.max_lag / 2.0]
        lower, upper = [0.0, lo_r], [4.0 * scale, hi_r]
        if not fixed_nugget:
            start = [min(g[0], 0.5 * scale) * 0.5] + start
            lower = [0.0] + lower
            upper = [scale] + upper
        lower, upper = np.array(lower, float), np.array(upper, float)
        room = upper - lower
        start = np.clip(start, lower + 1e-6 * room, upper - 1e-6 * room)
        # least squares from a few starting ranges; keep the best (the cost surface is not convex in the range)
        best = None
        for frac in (0.5, 0.15, 1.0, 2.0):
            x0 = start.copy()
            x0[-1] = np.clip(exp.max_lag * frac, lower[-1] + 1e-6 * room[-1], upper[-1] - 1e-6 * room[-1])
            sol = least_squares(residuals, x0, bounds=(lower, upper), x_scale="jac", max_nfev=2000,
                                xtol=1e-12, ftol=1e-12, gtol=1e-12)
            if best is None or sol.cost < best.cost:
                best = sol
        nug, psill, rng_ = unpack(best.x)
        psill = max(psill, 1e-12 * scale)
        exp = ExperimentalVariogram(exp.lags, exp.gamma * unit**2, exp.counts, exp.max_lag)
        return cls(model, float(nug * unit**2), float((nug + psill) * unit**2), float(rng_), angle, ratio,
                   experimental=exp)
