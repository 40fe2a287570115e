"""The rooms behind :class:`labeler.project.Project`, each with one reason to change.

- :mod:`.context`   the open file, the acting annotator, the per-process cache
- :mod:`.catalog`   recordings, signal, windows and features (what was recorded)
- :mod:`.ledger`    classes, labels, history, undo, interval import, several annotators
- :mod:`.maps`      map runs: fitting, storing, placing new windows into the latest map
- :mod:`.proposals` the window graph cache, proposal runs, the review queue
- :mod:`.audits`    audit draws and the accuracy estimate
- :mod:`.export`    gathering a consistent snapshot for :mod:`labeler.exporting`

The CLI and the app never import these; they talk to :class:`labeler.project.Project`.
"""
