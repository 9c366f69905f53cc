"""Exceptions raised by equiscan.

Every error carries the library's one-line message (``SUBJECT: what is wrong; what to do``),
its ``kind`` and the file it names (``path``, or ``None``). The kind says what a program
running many files should do:

- ``"input"`` (:class:`InputError`, also a ``ValueError``): the file or array is corrupt,
  truncated or unsupported; skip it, trying again gives the same result.
- ``"io"`` (:class:`IoError`, also an ``OSError``): the operating system failed (missing file,
  permissions, full disk); retry once the cause is fixed.
- ``"recipe"`` (:class:`RecipeError`, also a ``ValueError``): a parameter is not acceptable;
  stop, every file would fail the same way.
- ``"internal"`` (:class:`InternalError`, also a ``RuntimeError``): a defect of equiscan;
  report it.
"""


class Error(Exception):
    """Base class of every equiscan error."""

    kind = None

    def __init__(self, message, kind=None, path=None):
        super().__init__(message)
        if kind is not None:
            self.kind = kind
        self.path = path

    def __reduce__(self):
        # Picklable with its kind and path, so errors travel from Dask workers intact.
        return (type(self), (str(self), self.kind, self.path))


class InputError(Error, ValueError):
    """A corrupt, truncated, malformed or unsupported input (kind ``"input"``)."""

    kind = "input"


class IoError(Error, OSError):
    """The operating system refused or failed (kind ``"io"``)."""

    kind = "io"


class RecipeError(Error, ValueError):
    """A parameter is not acceptable (kind ``"recipe"``)."""

    kind = "recipe"


class InternalError(Error, RuntimeError):
    """A defect of equiscan (kind ``"internal"``)."""

    kind = "internal"


__all__ = ["Error", "InputError", "IoError", "RecipeError", "InternalError"]
