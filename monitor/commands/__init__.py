"""One module per `tankside` sub-command.

Each defines ``add_parser(subparsers)`` and ``run(args)``.
"""
