import sys

from tracefit.cli import main

sys.exit(main())
