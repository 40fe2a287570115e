"""labeler: a semi-supervised labeling assistant for wearable motion-sensor recordings."""

__version__ = "0.1.0"

from labeler.errors import LabelerError, InputError  # noqa: E402

__all__ = ["__version__", "LabelerError", "InputError"]
