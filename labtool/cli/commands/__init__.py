"""One module per subcommand; each defines ``register(subparsers)``."""
