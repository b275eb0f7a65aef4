"""blotter: an options position blotter in the terminal, with a live what-if."""

from __future__ import annotations

__version__ = "0.1.0"
