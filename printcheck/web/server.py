"""Run the application under uvicorn: the address, the access code and its QR code."""

from __future__ import annotations

import ipaddress
import socket
from collections.abc import Callable
from pathlib import Path

from printcheck.options import InspectOptions

__all__ = ["is_loopback", "lan_address", "serve"]


def is_loopback(host: str) -> bool:
    """True when ``host`` listens on this machine only (127.x, ::1, localhost)."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def lan_address() -> str:
    """This PC's address on the shop network (the one its default route uses)."""
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as probe:
        try:
            probe.connect(("10.255.255.255", 1))  # UDP: nothing is sent
            return str(probe.getsockname()[0])
        except OSError:
            return "127.0.0.1"


def qr_text(url: str) -> str:
    """``url`` as a QR code drawn with text blocks, for the terminal."""
    import io

    import qrcode

    code = qrcode.QRCode(border=2)
    code.add_data(url)
    code.make(fit=True)
    buffer = io.StringIO()
    code.print_ascii(out=buffer, invert=True)
    return buffer.getvalue()


def serve(
    *,
    options: InspectOptions,
    db: Path,
    out: Path,
    host: str,
    port: int,
    workers: int,
    max_upload_mb: int,
    watch: Path | None,
    echo: Callable[[str], None],
) -> int:
    """Serve until Ctrl-C; return the exit status."""
    import uvicorn

    from printcheck.web.app import WebConfig, create_app
    from printcheck.web.measurer import Measurer
    from printcheck.web.security import new_access_code

    local = is_loopback(host)
    code = None if local else new_access_code()
    config = WebConfig(
        db=db,
        out=out,
        access_code=code,
        max_upload_bytes=max_upload_mb * 1024 * 1024,
        default_surface=options.surface,
    )
    with Measurer(options=options, out=out, db=db, workers=workers) as measurer:
        app = create_app(config, measurer)
        watcher = None
        if watch is not None:
            from printcheck.web.watch import Watcher

            watcher = Watcher(watch, measurer, surface=options.surface or watch.resolve().name)
            watcher.start()
        shown = host if local else (lan_address() if host in ("0.0.0.0", "::") else host)
        url = f"http://{shown}:{port}/upload"
        echo(f"printcheck serve: history {db}, output folder {out}")
        if code is None:
            echo(f"open {url} (this PC only; --lan to open it from a phone)")
        else:
            full = f"{url}?code={code}"
            echo(f"access code: {code}")
            echo(f"on the phone, scan this or open {full}")
            echo(qr_text(full))
        if watcher is not None:
            echo(f"watching {watch} for new photos")
        echo("Ctrl-C stops the server.")
        server = uvicorn.Server(
            uvicorn.Config(app, host=host, port=port, log_level="warning", access_log=False)
        )
        try:
            server.run()
        finally:
            if watcher is not None:
                watcher.stop()
    return 0
