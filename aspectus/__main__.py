import sys

from aspectus.cli import main

sys.exit(main())
