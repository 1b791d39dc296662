"""``python -m trendmill.service``: the same as ``trendmill serve``."""

import sys

from ..cli_remote import main_serve

if __name__ == "__main__":
    sys.exit(main_serve())
