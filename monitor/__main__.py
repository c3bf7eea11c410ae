import sys

from monitor.interface.cli import main

sys.exit(main())
