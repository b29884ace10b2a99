import sys

from labtool.cli import main

sys.exit(main())
