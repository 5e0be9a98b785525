"""`python -m lagfield`: the same as the `lagfield` command."""

import sys

from .cli import main

if __name__ == "__main__":
    sys.exit(main())
