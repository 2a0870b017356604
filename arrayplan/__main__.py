"""``python -m arrayplan`` runs the command line."""

import sys

try:
    from .cli import main
except KeyboardInterrupt:           # Ctrl-C while the interpreter loads the package: no traceback
    sys.stderr.write("arrayplan: interrupted\n")
    sys.exit(130)

sys.exit(main())
