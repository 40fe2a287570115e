import numpy as np
import pandas as pd
import pytest


def sensor_frame(n=1000, rate=50.0, seed=0, sites=("wrist", "hip"), jitter=0.0):
    """A small table of samples in the column convention (values are arbitrary test signals)."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate
    if jitter:
        t = t + rng.uniform(-jitter, jitter, n) / rate
    data = {"time": t}
    for site in sites:
        for kind, scale in (("acc", 0.3), ("gyr", 40.0)):
            for k, axis in enumerate("xyz"):
                data[f"{site}_{kind}_{axis}"] = (scale * np.sin(2 * np.pi * (1 + k) * t)
                                                 + rng.normal(0, scale / 10, n)
                                                 + (1.0 if kind == "acc" and axis == "z" else 0))
    return pd.DataFrame(data)


@pytest.fixture
def write_csv(tmp_path):
    def write(frame, name="rec.csv", **kw):
        path = tmp_path / name
        frame.to_csv(path, index=False, **kw)
        return path
    return write
