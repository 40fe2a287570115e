"""Typed errors. Each carries one line that names the file, row or column and says what to do.

One tree: every error labeler reports derives from :class:`LabelerError`. This module imports
nothing, so every layer can import it: ``storage`` (whose ``StoreError`` derives from
``LabelerError``) takes nothing else from labeler, and the numerics raise :class:`ValueInputError`
(also a ``ValueError``, as scikit-learn-style code expects) or a subclass of it.
"""


class LabelerError(Exception):
    """Base class of every error labeler reports to a user (CLI exit code 2, no traceback)."""


class InputError(LabelerError):
    """A file or value given by the user cannot be used; the message says where and how to fix it."""


class ProjectError(LabelerError):
    """The project file cannot be opened or changed as asked."""


class ValueInputError(InputError, ValueError):
    """A value given to a numerics function is out of its range (also a ValueError)."""
