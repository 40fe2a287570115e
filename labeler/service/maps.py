"""Map runs: the 2-D picture of every window.

A map is a run of kind "map" (params: method and its parameters; summary: counts, seconds) with two
blobs: "map/<run>/coords" (npz: window_id int64, coords float32 (n, 2)) and "map/<run>/state"
(:meth:`labeler.embedding.MapState.to_bytes`: plain arrays only). Adding recordings to a project that
has a map places their windows into it as a new run (:meth:`Maps.place_new`); a full re-fit is
:meth:`Maps.compute`.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import io

from labeler.errors import InputError, ProjectError
from labeler.results import MapRun
from labeler.service.catalog import Catalog
from labeler.service.context import Context, Progress

if TYPE_CHECKING:  # pandas is imported where a table is made
    import pandas as pd

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())


class Maps:
    """Fitting, storing and reading maps of one project."""

    def __init__(self, ctx: Context, catalog: Catalog):
        self.ctx = ctx
        self.catalog = catalog

    def compute(self, method: str = "pca", *, progress: Progress | None = None,
                random_state: int = 0, n_jobs: int = 1, **params) -> MapRun:
        """Fit a map of every window ("pca" or "tsne") and store it as a run."""
        from labeler.embedding import make_map

        if method not in ("pca", "tsne"):
            raise InputError(f"unknown map method {method!r}; use 'pca' or 'tsne'")
        X, _ = self.catalog.features()
        wins = self.catalog.windows()
        if len(wins) == 0:
            raise InputError(f"{self.ctx.path}: no windows yet; add recordings first (`labeler add`)")
        kwargs = {"progress": progress}
        if method == "tsne":
            kwargs.update(random_state=random_state, n_jobs=n_jobs,
                          strata=wins["recording_id"].to_numpy(), **params)
        try:
            res = make_map(X, method, **kwargs)
        except InputError as exc:
            raise InputError(f"{self.ctx.path}: {exc}") from None
        summary = {"n_windows": int(len(wins)), "n_fitted": int(res.fitted.sum()), "n_placed": 0,
                   "seconds": res.params.get("seconds")}
        return self._store(res.params, summary, wins["id"].to_numpy(), res.coords, res.state)

    def _store(self, params: dict, summary: dict, ids: np.ndarray, coords: np.ndarray,
               state) -> MapRun:
        store = self.ctx.store
        buf = io.BytesIO()
        np.savez(buf, window_id=np.asarray(ids, dtype=np.int64),
                 coords=np.asarray(coords, dtype=np.float32))
        with store.atomic():
            run_id = store.add_run("map", params, summary, created_by=self.ctx.annotator)
            store.put_blob(f"map/{run_id}/coords", buf.getvalue(), run_id=run_id)
            store.put_blob(f"map/{run_id}/state", state.to_bytes(), run_id=run_id)
        self.ctx.invalidate("map")
        return MapRun(run_id=int(run_id), method=str(params.get("method")),
                      n_windows=summary["n_windows"], n_fitted=summary["n_fitted"],
                      n_placed=summary["n_placed"], seconds=summary.get("seconds"),
                      placed_into_run=params.get("placed_into_run"),
                      placed_recordings=tuple(summary.get("placed_recordings", ())))

    def latest(self):
        """(run, window ids, coords, MapState) of the latest map run, or None."""
        from labeler.embedding import MapState

        store = self.ctx.store
        run = store.latest_run("map")
        if run is None:
            return None
        coords_blob = store.get_blob(f"map/{run['id']}/coords")
        state_blob = store.get_blob(f"map/{run['id']}/state")
        if coords_blob is None or state_blob is None:
            raise ProjectError(f"{self.ctx.path}: map run {run['id']} has lost its data; run "
                               "`labeler map` again")
        with np.load(io.BytesIO(coords_blob[0]), allow_pickle=False) as z:
            ids, coords = z["window_id"], z["coords"]
        return run, ids, coords, MapState.from_bytes(state_blob[0])

    def run_id(self) -> int | None:
        """Id of the run that made the latest map, or None when there is no map yet."""
        run = self.ctx.store.latest_run("map")
        return None if run is None else int(run["id"])

    def method(self) -> str | None:
        """How the latest map was made ("pca" or "tsne"), or None when there is no map yet."""
        run = self.ctx.store.latest_run("map")
        return None if run is None else str(run["params"].get("method", "pca"))

    def coordinates(self) -> pd.DataFrame:
        """Latest map: columns window_id, x, y (windows added since, if any, are placed)."""
        import pandas as pd

        cache = self.ctx.cache
        if "map" not in cache:
            latest = self.latest()
            if latest is None:
                df = pd.DataFrame({"window_id": np.empty(0, np.int64), "x": np.empty(0, np.float32),
                                   "y": np.empty(0, np.float32)})
            else:
                _, ids, coords, _ = latest
                keep = np.isin(ids, self.catalog.windows()["id"].to_numpy())  # not removed ones
                df = pd.DataFrame({"window_id": ids[keep], "x": coords[keep, 0],
                                   "y": coords[keep, 1]})
            cache["map"] = df
        return cache["map"].copy()

    def place_new(self, recording_ids: list[int]) -> MapRun | None:
        """Place windows missing from the latest map into it (no re-fit); store as a new run."""
        from labeler.embedding import place

        latest = self.latest()
        if latest is None:
            return None
        run, ids, coords, state = latest
        X, _ = self.catalog.features()
        all_ids = self.catalog.windows()["id"].to_numpy()
        new = ~np.isin(all_ids, ids)
        if not new.any():
            return None
        placed = place(state, X[new])
        keep = np.isin(ids, all_ids)
        out_ids = np.concatenate([ids[keep], all_ids[new]])
        out = np.concatenate([coords[keep], placed])
        order = np.argsort(out_ids, kind="stable")
        params = dict(run["params"])
        params["placed_into_run"] = int(run["id"])
        summary = {"n_windows": int(out_ids.size), "n_fitted": int(run["summary"].get("n_fitted", 0)),
                   "n_placed": int(run["summary"].get("n_placed", 0)) + int(new.sum()),
                   "placed_recordings": [int(r) for r in recording_ids]}
        return self._store(params, summary, out_ids[order], out[order], state)
