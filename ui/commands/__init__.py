"""One module per `forcelens` sub-command; each exposes `register(subparsers)`."""
