"""One module per subcommand. Each defines ``NAME``, ``HELP``, ``register(parser)`` and ``run(args) -> int``.

The CLI discovers the modules in this package, so adding a command means adding a module here.
"""
