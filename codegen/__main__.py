import sys

from edgetally.cli.main import main

sys.exit(main())
