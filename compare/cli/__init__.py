"""The ``fluidgap`` command line: argument parsing, exit codes, one handler per command.

The console script is ``fluidgap = compare.cli:main``.
"""

from .main import main

__all__ = ["main"]
