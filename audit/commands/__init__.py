"""Sub-commands of ``lti-audit`` beyond ``compare`` and ``inspect``.

Each module in this package defines::

    NAME: str                                  # the sub-command, e.g. "stress"
    HELP: str                                  # one line for ``lti-audit --help``
    def add_arguments(parser) -> None: ...     # argparse options
    def run(args) -> int: ...                  # the exit status (DESIGN.md conventions)

Modules must import only the standard library at module level (numerics lazily inside
``run``) so that the command starts fast. ``audit.cli`` discovers them with pkgutil.
Errors derived from ``audit.errors.AuditError`` raised by ``run`` become exit status 2
with the message on stderr, in one place (``audit.cli.main``).
"""
