"""The ``yieldscape`` command: one module per subcommand over the library API."""
