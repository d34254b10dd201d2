"""``python -m service …`` is the ``ullage`` command."""

import sys

from service.cli import main

sys.exit(main())
