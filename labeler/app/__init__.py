"""The browser app: a Bokeh server app on 127.0.0.1 over one project file.

:func:`labeler.app.document.build_document` builds one session's document on a Bokeh ``Document``;
:func:`labeler.app.server.serve` serves it. The app talks to :class:`labeler.project.Project` only.
"""

from labeler.app.words import CAUTION  # noqa: F401
from labeler.app.document import build_document  # noqa: F401
