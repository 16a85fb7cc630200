import sys

from daemon.commands.cli import main

sys.exit(main())
