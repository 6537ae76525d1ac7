import sys

try:  # a SIGINT while the command is still being imported is an interrupt, not a traceback
    from shaper.cli.main import entry
except KeyboardInterrupt:
    sys.exit(130)

entry()
