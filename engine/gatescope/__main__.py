"""`python -m gatescope` is the `gatescope` command."""

import sys

from .cli import main

sys.exit(main())
