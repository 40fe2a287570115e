"""The `labeler` command line, one module per family of commands (see :mod:`labeler.cli`).

:mod:`.base` holds the command group and what the commands share; importing :mod:`.setup`,
:mod:`.labels`, :mod:`.proposals` and :mod:`.study` registers their commands on it.
"""
