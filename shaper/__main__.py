import sys

from shaper.cli.main import main

sys.exit(main())
