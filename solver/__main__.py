import sys

from solver.run.cli import main

sys.exit(main())
