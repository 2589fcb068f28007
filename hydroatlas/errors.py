"""One exception tree for hydroatlas.

Every error raised on purpose derives from :class:`HydroatlasError`, and each
subclass also derives the builtin that fits, so callers that do not know
hydroatlas can still catch ``ValueError`` or ``LookupError``. The command line
turns any :class:`HydroatlasError` into a one-line message and exit code 2.
"""

from __future__ import annotations


class HydroatlasError(Exception):
    """Root of every error hydroatlas raises on purpose.

    A library message names each parameter at fault as Python spells it, followed by ``=``
    (``"cell= must be > 0; got 0"``), never as a command-line option; :attr:`param` holds those names, and a front
    end that spells them differently (the command line's ``--cell``) rewrites the message with :meth:`renamed`.
    """

    def __init__(self, *args, param: str | tuple[str, ...] | None = None):
        #: the parameter name(s) the message names (``name=``): a str, a tuple of str, or None
        self.param = param
        super().__init__(*args)

    def __reduce__(self):  # process pools pickle errors: keep ``param`` and the other attributes
        return (_rebuild, (type(self), self.args, dict(self.__dict__)))

    @property
    def params(self) -> tuple[str, ...]:
        """The names of :attr:`param` as a tuple (empty when none was given)."""
        if self.param is None:
            return ()
        return (self.param,) if isinstance(self.param, str) else tuple(self.param)

    def renamed(self, names) -> str:
        """The message with each ``name=`` of :attr:`params` replaced by the front end's spelling.

        Parameters
        ----------
        names : mapping or callable
            Parameter name -> its spelling (e.g. ``{"cell": "--cell"}``); a callable is called with the name.
            A name it does not give (None or missing) keeps its ``name=`` spelling.

        A flag written ``name=True`` becomes the spelling alone, and a value or metavar written right after
        the ``=`` (``tolerance_days=DAYS``, ``input_crs=EPSG:4326``) follows the spelling after a space.

        >>> ParameterError("cell= must be > 0; got 0", param="cell").renamed({"cell": "--cell"})
        '--cell must be > 0; got 0'
        >>> ParameterError("give include_poor=True or a wider tolerance_days=DAYS", param=("include_poor",
        ...                "tolerance_days")).renamed({"include_poor": "--include-poor", "tolerance_days": "--tolerance"})
        'give --include-poor or a wider --tolerance DAYS'
        """
        return rename_params(str(self), self.params, names)


def rename_params(text: str, params, names) -> str:
    """``text`` with each ``name=`` of ``params`` spelled as ``names`` says (see :meth:`HydroatlasError.renamed`).

    For texts that are not errors but name parameters the same way (the notes of a selection).
    """
    import re

    for p in ((params,) if isinstance(params, str) else params or ()):
        spelled = names(p) if callable(names) else names.get(p)
        if spelled:  # "flag=True" is the flag alone; "name=VALUE" becomes "--name VALUE"
            text = re.sub(rf"(?<![\w.]){re.escape(p)}=(?:True\b)?(?=(\w)?)",
                          lambda m, s=spelled: s + (" " if m.group(1) else ""), text)
    return text


def _rebuild(cls, args, state):
    exc = cls.__new__(cls, *args)
    exc.args = args
    exc.__dict__.update(state)
    return exc


class ParameterError(HydroatlasError, ValueError):
    """A function or command argument is out of its allowed range or shape (``param=``: which one)."""


class StaleProductError(ParameterError):
    """A derived product (surface, scenario...) was made from store rows that changed since.

    The message names the product, the tables whose rows changed and the command that remakes it;
    :attr:`products` holds the names of the stale products.
    """

    def __init__(self, *args, products: tuple[str, ...] = (), param=None):
        self.products = tuple(products)
        super().__init__(*args, param=param)


class UnitError(HydroatlasError, ValueError):
    """An unknown or unsupported physical unit label."""


class StoreError(HydroatlasError, OSError):
    """The store cannot be opened, created or written."""


class NotAStoreError(StoreError):
    """The path or URL exists but is not a hydroatlas store."""


class InsufficientDataError(HydroatlasError, ValueError):
    """Too few values for the requested computation (``param=``: the parameter that would supply them)."""


class NotFittedError(HydroatlasError, RuntimeError):
    """``predict`` was called before ``fit``."""


class ImportDataError(HydroatlasError, ValueError):
    """An input file is refused; nothing of it was written to the store.

    Parameters
    ----------
    message : str
        What is wrong and what to fix.
    file : str, optional
        The input file name.
    row : int, optional
        1-based data row (the header is row 0; the file line is ``row + 1``).
    column : str, optional
        The offending column name.
    param : str or tuple of str, optional
        The function parameter(s) named in ``message`` (see :class:`HydroatlasError`).
    """

    def __init__(self, message: str, *, file: str | None = None,
                 row: int | None = None, column: str | None = None,
                 param: str | tuple[str, ...] | None = None):
        self.file = file
        self.row = row
        self.column = column
        self.detail = message
        super().__init__(self._format(), param=param)

    def _format(self) -> str:
        where = []
        if self.file is not None:
            where.append(str(self.file))
        if self.row == 0:
            where.append("header (line 1)")
        elif self.row is not None:
            where.append(f"row {self.row} (line {self.row + 1})")
        if self.column is not None:
            where.append(f"column '{self.column}'")
        return (", ".join(where) + ": " if where else "") + self.detail
