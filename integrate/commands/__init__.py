"""One module per ``integrate`` sub-command; each defines ``register(subparsers)``.

A command module parses nothing itself beyond its own arguments and calls the public API; it
prints results. Add a command by adding its module name to ``COMMANDS``.
"""

COMMANDS = ("run", "evaluate", "schema", "review", "check", "suggest", "show", "changes", "explain", "blocking",
            "mappings", "serve", "split", "export", "init")
