"""Command-line interface: one module per subcommand, registered in :mod:`unmix.cli.main`."""
