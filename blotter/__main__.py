"""Run the command line: ``python -m blotter``."""

from __future__ import annotations

from blotter.cli import main

if __name__ == "__main__":
    main()
