"""One module per ``envlink`` sub-command; each has ``register(subparsers)`` and ``run(args)``."""
