"""A fitted map kept as plain arrays (:class:`MapState`) and a map's result (:class:`MapResult`);
see :mod:`labeler.embedding` for how they are made and used."""

from __future__ import annotations

import io
import json
from dataclasses import dataclass, field

import numpy as np

from labeler.errors import InputError

METHODS = ("pca", "tsne")


class MapInputError(InputError, ValueError):
    """Bad input to the map (also a ValueError, as scikit-learn conventions expect)."""



@dataclass
class MapState:
    """Everything needed to place new windows into a fitted map, as plain arrays.

    ``components`` apply to standardized features ((x - mean) / scale). For a t-SNE map
    ``reference`` holds the reduced features (float32, n_ref x k) of the windows the map was fitted
    on and ``reference_coords`` their 2-D coordinates; both are empty for a PCA map.
    """

    method: str
    mean: np.ndarray
    scale: np.ndarray
    components: np.ndarray
    reference: np.ndarray
    reference_coords: np.ndarray
    params: dict = field(default_factory=dict)

    _ARRAYS = ("mean", "scale", "components", "reference", "reference_coords")

    def to_arrays(self) -> dict[str, np.ndarray]:
        out = {name: np.asarray(getattr(self, name)) for name in self._ARRAYS}
        out["method"] = np.frombuffer(self.method.encode(), dtype=np.uint8)
        out["params"] = np.frombuffer(json.dumps(self.params, sort_keys=True).encode(), dtype=np.uint8)
        return out

    @classmethod
    def from_arrays(cls, arrays) -> "MapState":
        try:
            method = bytes(np.asarray(arrays["method"], dtype=np.uint8)).decode()
            params = json.loads(bytes(np.asarray(arrays["params"], dtype=np.uint8)).decode())
            vals = {name: np.asarray(arrays[name]) for name in cls._ARRAYS}
        except (KeyError, ValueError, UnicodeDecodeError) as exc:
            raise MapInputError(f"stored map state is incomplete or damaged ({exc}); "
                                "compute the map again") from None
        state = cls(method=method, params=params, **vals)
        state.validate()
        return state

    def to_bytes(self) -> bytes:
        buf = io.BytesIO()
        np.savez(buf, **self.to_arrays())
        return buf.getvalue()

    @classmethod
    def from_bytes(cls, data: bytes) -> "MapState":
        try:
            with np.load(io.BytesIO(data), allow_pickle=False) as z:
                arrays = {name: z[name] for name in z.files}
        except (OSError, ValueError, EOFError) as exc:
            raise MapInputError(f"stored map state cannot be read ({exc}); compute the map again"
                                ) from None
        return cls.from_arrays(arrays)

    @property
    def n_features(self) -> int:
        return int(self.mean.shape[0])

    def validate(self) -> None:
        d = self.mean.shape[0]
        ok = (self.method in METHODS and self.mean.ndim == 1 and self.scale.shape == (d,)
              and self.components.ndim == 2 and self.components.shape[1] == d
              and self.reference.ndim == 2 and self.reference_coords.ndim == 2
              and self.reference.shape[0] == self.reference_coords.shape[0])
        if ok and self.method == "tsne":
            ok = (self.reference.shape[1] == self.components.shape[0]
                  and self.reference_coords.shape[1] == 2 and self.reference.shape[0] >= 2)
        if not ok:
            raise MapInputError("stored map state has inconsistent array shapes; compute the map again")


@dataclass
class MapResult:
    """A map: ``coords`` float32 (n, 2) in the order of the input rows.

    ``fitted`` marks the rows the map was fitted on (all of them unless the input was subsampled;
    the others were placed into the map). ``params`` is JSON-able.
    """

    coords: np.ndarray
    method: str
    params: dict
    state: MapState
    fitted: np.ndarray
