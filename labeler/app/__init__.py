"""The browser app: a Bokeh server app on 127.0.0.1 over one project file.

:func:`labeler.app.document.build_document` builds one session's document on a Bokeh ``Document``;
:func:`labeler.app.server.serve` serves it. The app talks to :class:`labeler.project.Project` only.
Nothing is imported here, so the proposal worker's process (``labeler.app.worker``) starts
without Bokeh.
"""


def __getattr__(name):
    if name == "build_document":
        from labeler.app.document import build_document

        return build_document
    if name == "CAUTION":
        from labeler.app.words import CAUTION

        return CAUTION
    raise AttributeError(name)
