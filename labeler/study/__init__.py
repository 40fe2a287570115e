"""Whole studies: many recordings added in parallel, and a project's labels carried to every
recording of a study (:mod:`labeler.study.ingest`, :mod:`labeler.study.apply`), on a Dask cluster or
a local process pool (:mod:`labeler.study.runner`)."""
