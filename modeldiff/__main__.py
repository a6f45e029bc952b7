import sys

from modeldiff.cli import main

sys.exit(main())
