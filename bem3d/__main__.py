"""python -m bem3d: the command line."""

import sys

from bem3d._cli.main import main

sys.exit(main())
