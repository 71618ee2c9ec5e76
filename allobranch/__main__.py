"""Allow ``python -m allobranch`` (same as the ``allobranch`` command)."""

import sys

from allobranch.cli import main

sys.exit(main())
