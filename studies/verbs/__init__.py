"""The verbs of the ``filamant`` command, one module each.

A verb module exposes:

``EXAMPLE : str``
    One example command line, shown under ``filamant <verb> --help``.
``add_arguments(parser: argparse.ArgumentParser) -> None``
    Adds the verb's own arguments (use :mod:`studies.verbs.common` for ``--set`` and ``--json``).
``run(args: argparse.Namespace) -> int``
    Does the work and returns the exit status. Results go to stdout, logs to stderr through
    ``logging.getLogger(__name__)``. Bad input raises a :class:`~sweeps.errors.FilamantError`;
    :func:`studies.cli.main` turns it into one line on stderr and exit status 2.

:mod:`studies.cli` imports a verb module only when that verb is invoked. Module names follow the
verb (``import_`` and ``yield_`` for the Python keywords); a verb whose module does not exist yet
says so and exits with status 2.
"""
