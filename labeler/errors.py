"""Typed errors. Each carries one line that names the file, row or column and says what to do."""


class LabelerError(Exception):
    """Base class of every error labeler reports to a user (CLI exit code 2, no traceback)."""


class InputError(LabelerError):
    """A file or value given by the user cannot be used; the message says where and how to fix it."""


class ProjectError(LabelerError):
    """The project file cannot be opened or changed as asked."""
