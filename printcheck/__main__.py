"""``python -m printcheck``: the same as the ``printcheck`` command."""

from printcheck.cli import main

main()
