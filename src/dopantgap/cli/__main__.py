"""``python -m dopantgap.cli``: the same command line as the ``dopantgap`` script."""

import sys

from dopantgap.cli import main

if __name__ == "__main__":
    sys.exit(main())
