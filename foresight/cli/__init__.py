"""The ``foresight`` command: one module per subcommand over the library API."""
