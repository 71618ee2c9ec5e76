"""Allow ``python -m allobranch.cli``."""

import sys

from allobranch.cli import main

sys.exit(main())
