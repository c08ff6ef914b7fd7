"""Line-mode subcommands. Each module exposes ``register(subparsers)``.

``register`` adds one subparser and sets ``func`` to a ``run(args) -> int`` callable.
Handlers raise :class:`engine.errors.BendwiseError` for bad input; ``tui.cli.main``
turns that into one line on stderr and exit status 2.
"""
