"""``python -m printcheck``: the same as the ``printcheck`` command."""

import sys


def run() -> None:
    """The ``printcheck`` command: :func:`printcheck.cli.main`, Ctrl-C while it loads too."""
    try:
        from printcheck.cli import main
    except KeyboardInterrupt:  # Ctrl-C while Python was still loading the command line
        sys.stderr.write("printcheck: interrupted before it began; nothing was done\n")
        sys.exit(130)
    main()


if __name__ == "__main__":
    run()
