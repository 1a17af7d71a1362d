"""``python -m samplewright``: the command line, with Ctrl-C during its imports also ending in one line."""

import sys

try:
    from samplewright.cli.main import main
except KeyboardInterrupt:  # before main() can catch it: the imports of start-up
    from samplewright.errors import INTERRUPTED

    print(INTERRUPTED, file=sys.stderr)
    raise SystemExit(130) from None

raise SystemExit(main())
