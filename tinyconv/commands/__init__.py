"""One module per command: ``configure(parser)`` adds options, ``run(args)`` does it."""
