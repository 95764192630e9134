"""`python -m sim.cli`: the recoilsim command."""

import sys

from .commands import main

sys.exit(main())
