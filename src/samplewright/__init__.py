"""samplewright: rehearse competing sampling designs on a population frame and score them."""

from __future__ import annotations

__version__ = "0.1.0"

from .errors import InputError
from .frame import Frame

__all__ = ["__version__", "Frame", "InputError"]
