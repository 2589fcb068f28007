"""The caution texts shown to users (SPEC section 7), written once.

Every product that can lead to decisions about water (surfaces, gradients,
pathways, drawdown scenarios, model grids, the web map, figures) and the
``--help`` of the commands that make them carry these texts, taken from here
and nowhere else. The module holds plain strings only, so the command line can
import it without slowing ``hydroatlas --help``.

Media:

- plain text (GeoTIFF tags, JSON sidecars, manifests, the NetCDF ``comment``
  attribute, the terminal): :func:`caution_text`;
- ``--help`` of a command: :func:`help_paragraph`;
- HTML: pass the plain text to :func:`hydroatlas.export.webmap.write_webmap`,
  which escapes it with ``safe_text``; figures carry the short :data:`FIGURE_FOOTER`.
"""

from __future__ import annotations

#: The caution of SPEC section 7, in its words: carried by every product and by the README.
CAUTION = ("Results are screening-level estimates for planning and model set-up, not a substitute for "
           "site-specific investigation or for the judgement of a licensed professional geoscientist or "
           "engineer; well construction, testing and pumping are governed by local rules and permits.")

#: Added for interpolated surfaces and everything made from them.
SURFACE_CAUTION = ("Interpolated surfaces do not see conduits, faults or barriers; in karst, flow can be far "
                   "faster than a smooth surface suggests.")

#: Added for particle paths, travel times and contributing areas.
KARST_WARNING = ("Darcy travel times on a smooth head surface are upper bounds in karst: conduits can carry water "
                 "orders of magnitude faster, and particle paths do not see conduits, faults or barriers.")

#: Added for pumping scenarios.
THEIS_CAUTION = ("Theis assumes a uniform, infinite, confined aquifer; boundaries, leakage and karst conduits "
                 "change real drawdown.")

#: The short line at the foot of every figure.
FIGURE_FOOTER = "Screening-level estimate; see the cautions in the README."

#: Which texts each kind of product carries after :data:`CAUTION`, in order.
_ADDED = {
    "general": (),
    "surface": (SURFACE_CAUTION,),
    "gradient": (SURFACE_CAUTION,),
    "pathways": (SURFACE_CAUTION, KARST_WARNING),
    "drawdown": (SURFACE_CAUTION, THEIS_CAUTION),
    "model_grid": (SURFACE_CAUTION,),
    "map": (SURFACE_CAUTION, KARST_WARNING),
}

PRODUCTS = tuple(_ADDED)


def caution_texts(product: str = "general") -> list[str]:
    """The caution of ``product`` as a list of sentences: :data:`CAUTION` first, then what the product adds.

    Parameters
    ----------
    product : str
        One of :data:`PRODUCTS`: ``general``, ``surface``, ``gradient``, ``pathways``, ``drawdown``,
        ``model_grid`` or ``map``.

    Returns
    -------
    list of str
        Plain text; escape it before putting it into HTML.
    """
    try:
        added = _ADDED[product]
    except KeyError:
        from .errors import ParameterError

        raise ParameterError(f"product= must be one of {', '.join(PRODUCTS)}; got {product!r}",
                             param="product") from None
    return [CAUTION, *added]


def caution_text(product: str = "general") -> str:
    """The caution of ``product`` as one line of plain text (see :func:`caution_texts`).

    >>> caution_text().startswith("Results are screening-level estimates")
    True
    >>> caution_text("drawdown").endswith("change real drawdown.")
    True
    """
    return " ".join(caution_texts(product))


def help_paragraph(product: str = "general") -> str:
    """The caution of ``product`` as a ``--help`` paragraph: "Caution: " and the text (click wraps it)."""
    return "Caution: " + caution_text(product)
