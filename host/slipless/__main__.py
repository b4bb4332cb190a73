import sys

from slipless.cli import main

sys.exit(main())
