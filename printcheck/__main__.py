"""``python -m printcheck``: the same as the ``printcheck`` command."""

import signal
import sys


def _load_native_libraries() -> None:
    """Load numpy and OpenCV with Ctrl-C (and SIGTERM) held back.

    OpenCV's module start-up runs Python code; a Ctrl-C in the middle of it leaves the
    module half made ("ImportError: initialization failed"), and the interpreter may then
    abort on its way out.  Held back, a Ctrl-C that came meanwhile takes effect as soon
    as they are loaded, as an ordinary interrupt.
    """
    from printcheck.signalmask import signals_blocked

    with signals_blocked(signal.SIGINT, signal.SIGTERM):
        import cv2  # noqa: F401
        import numpy  # noqa: F401


def run() -> None:
    """The ``printcheck`` command: :func:`printcheck.cli.main`, Ctrl-C while it loads too."""
    try:
        _load_native_libraries()
        from printcheck.cli import main
    except KeyboardInterrupt:  # Ctrl-C while Python was still loading the command line
        sys.stderr.write(
            "printcheck: interrupted before it began; nothing was done; "
            "run the same command again\n"
        )
        sys.exit(130)
    main()


if __name__ == "__main__":
    run()
