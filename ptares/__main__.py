import sys

from ptares.cli import main

sys.exit(main())
