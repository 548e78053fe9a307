"""One module per `tankside` sub-command; each defines ``add_parser(subparsers)`` and ``run(args)``."""
