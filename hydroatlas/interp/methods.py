"""The rules a surface applies to its interpolation method: neighbourhood size, enough points, comparison.

Pure: arrays and interpolators in, numbers and dicts out. The interpolators themselves are set up by
:func:`hydroatlas.workflows.surfaces.make_interpolator` (variogram fitted on the data or fixed).
"""

from __future__ import annotations

from ..errors import InsufficientDataError, ParameterError

#: the methods of ``surface``: ordinary kriging, universal kriging (linear drift), inverse-distance weighting
METHODS = ("kriging", "uk", "idw")
#: fewest data points each method is run with (a variogram needs three; a linear drift one more)
MIN_POINTS = {"kriging": 3, "uk": 4, "idw": 1}
#: with ``neighbors='auto'``: one global system up to this many points, else local neighbourhoods of
#: AUTO_NEIGHBORS points
AUTO_GLOBAL_MAX = 400
AUTO_NEIGHBORS = 16


def resolve_neighbors(neighbors, n_points: int):
    """The neighbourhood size for ``n_points`` data points: ``'auto'`` chooses, anything else passes through.

    ``'auto'`` gives None (one global system: no neighbourhood seams) for up to :data:`AUTO_GLOBAL_MAX`
    points and :data:`AUTO_NEIGHBORS` nearest points above that.

    >>> resolve_neighbors("auto", 400), resolve_neighbors("auto", 401), resolve_neighbors(8, 10_000)
    (None, 16, 8)
    """
    if isinstance(neighbors, str) and neighbors == "auto":
        return None if n_points <= AUTO_GLOBAL_MAX else AUTO_NEIGHBORS
    return neighbors


def require_points(method: str, n_points: int, *, what: str = "points") -> None:
    """Refuse too few data points for a method (:class:`InsufficientDataError` naming the method and count).

    An unknown method name is left to the interpolator set-up to refuse (it needs at least one point here).

    >>> require_points("uk", 3, what="wells with head")
    Traceback (most recent call last):
    ...
    hydroatlas.errors.InsufficientDataError: uk needs at least 4 wells with head; found 3
    """
    needed = MIN_POINTS.get(method, 1)
    if n_points < needed:
        raise InsufficientDataError(f"{method} needs at least {needed} {what}; found {n_points}")


def cross_validate_methods(xy, z, candidates: dict) -> dict:
    """Leave-one-out figures of each candidate interpolator on the same data.

    Parameters
    ----------
    xy : array (n, 2)
    z : array (n,)
    candidates : dict
        Method name -> an interpolator, or a callable without arguments that makes one (called here, so a
        method that cannot be set up on these data is recorded instead of stopping the others).

    Returns
    -------
    dict
        Method name -> :func:`hydroatlas.interp.crossval.summary` of its
        :func:`~hydroatlas.interp.crossval.leave_one_out` (mean error, RMSE, mean standardised error, ...),
        or ``{"error": message}`` where making or validating it raised an :class:`InsufficientDataError` or
        :class:`ParameterError`; in the order of ``candidates``.
    """
    from . import crossval

    out = {}
    for name, candidate in candidates.items():
        try:
            model = candidate if hasattr(candidate, "predict") else candidate()
            out[name] = crossval.summary(crossval.leave_one_out(model, xy, z))
        except (InsufficientDataError, ParameterError) as exc:
            out[name] = {"error": str(exc)}
    return out
