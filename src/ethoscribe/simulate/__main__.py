"""``python -m ethoscribe.simulate --out DIR``: write simulated example sessions."""

from __future__ import annotations

import sys

from ethoscribe.simulate.examples import main

if __name__ == "__main__":
    sys.exit(main())
