"""``python -m services.cli``: the same as the ``phasewright`` command."""

import sys

from services.cli.main import main

sys.exit(main())
