"""``python -m qgforce``: the command line of :mod:`qgforce.cli`."""

import sys

from .cli import main

__all__: list = []

sys.exit(main())
