import sys

from churnlife.cli import main

sys.exit(main())
