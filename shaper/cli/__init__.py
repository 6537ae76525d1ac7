"""The ``shaper`` command: one module per subcommand; none has physics of its own."""
