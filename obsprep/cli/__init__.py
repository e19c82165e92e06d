"""Command line: a thin click layer over the Python API (one module per subcommand)."""
