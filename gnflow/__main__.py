"""``python -m gnflow``: the command line."""

import sys

try:
    from .cli import main
except KeyboardInterrupt:   # Ctrl-C during start-up: the same one line as during a run
    print("gnflow: interrupted; results of this run were not written", file=sys.stderr)
    sys.exit(130)

sys.exit(main())
