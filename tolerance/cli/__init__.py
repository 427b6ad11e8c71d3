"""The ``retol`` command line: a thin face over the library, one module per subcommand."""
