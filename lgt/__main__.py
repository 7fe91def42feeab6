import sys

from lgt.cli import main

sys.exit(main())
