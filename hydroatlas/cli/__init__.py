"""The ``hydroatlas`` command line: argument parsing only; each command calls one workflow.

One module per group of commands, mirroring :mod:`hydroatlas.workflows`; what they share (the group, option
types and shared options, output helpers) is in :mod:`hydroatlas.cli._common`.

Exit codes: 0 success, 2 bad usage or bad input (one-line message on stderr),
1 internal error (traceback with --debug).
"""

from __future__ import annotations

from . import analysis, copy, hydrographs, outputs, pathways, products, springs, store, surfaces  # noqa: F401 - each registers its commands on main
from ._common import (  # noqa: F401 - the names other code and the tests use
    ANGLE,
    CAUTION,
    COUNT,
    FINITE,
    FRACTION,
    KINDS,
    NON_NEGATIVE,
    OPEN_FRACTION,
    PER_CHOICES,
    POSITIVE,
    SLUG_METHODS,
    SURFACE_METHODS,
    SURFACE_QUANTITIES,
    Finite,
    Quantity,
    UnitName,
    main,
)

__all__ = ["main"]
