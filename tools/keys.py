"""Write a CURVE key pair for the node or a client (ZeroMQ RFC 26/CurveZMQ).

`veer keys DIR` writes DIR/NAME.key (the public key: give it to the other side) and
DIR/NAME.key_secret (the key pair: keep it; readable by its owner only, mode 0600).
NAME is the folder's name unless --name says otherwise. Existing files are kept unless
--force. The files are ZeroMQ certificate text (the format czmq and pyzmq read), so a
folder of clients' NAME.key files is what the node's [security] allowed_clients_dir
names. The keys themselves are never printed.

Exit codes: 0 written, 2 bad input (a file exists, a folder cannot be written).
"""

from __future__ import annotations

import datetime
import os
import re
import sys
from pathlib import Path

from veer.tools.errors import EXIT_BAD_INPUT, EXIT_OK

__all__ = ["add_arguments", "run", "write_key_pair", "KeyFileError"]

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,99}$")


class KeyFileError(ValueError):
    """A key pair that cannot be written; the message is one line."""


def add_arguments(parser) -> None:
    """Add the `veer keys` arguments to an argparse parser."""
    parser.add_argument("dir", metavar="DIR", help="folder to write NAME.key and NAME.key_secret into (made if missing)")
    parser.add_argument("--name", help="file name without extension (default: the folder's name)")
    parser.add_argument("--force", action="store_true", help="replace existing key files")


def _certificate(public: str, secret: str | None) -> str:
    """ZeroMQ certificate text (ZPL): a ``curve`` section with the Z85 keys (RFC 32)."""
    kind = "secret" if secret else "public"
    lines = [f"#   ZeroMQ CURVE {kind} certificate, written by veer keys on "
             f"{datetime.datetime.now(datetime.timezone.utc):%Y-%m-%d %H:%M:%S} UTC",
             "#   " + ("keep this file to yourself (mode 0600)" if secret else "give this file to the other side"),
             "", "metadata", "curve", f'    public-key = "{public}"']
    if secret:
        lines.append(f'    secret-key = "{secret}"')
    return "\n".join(lines) + "\n"


def _write(path: Path, text: str, mode: int) -> None:
    """Write a new file with ``mode`` from the start (never readable by others on the way), then move it in place."""
    temporary = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    descriptor = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, mode)
    try:
        with os.fdopen(descriptor, "w", encoding="ascii") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.chmod(temporary, mode)  # the umask may have narrowed it; never widens the secret's 0600
        os.replace(temporary, path)
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise


def write_key_pair(folder, name: str | None = None, *, force: bool = False) -> tuple[Path, Path]:
    """Write ``folder/NAME.key`` (0644) and ``folder/NAME.key_secret`` (0600); returns both paths.

    Raises :class:`KeyFileError` (one line) when a file exists and ``force`` is false, or
    the folder cannot be written.
    """
    import zmq

    folder = Path(folder)
    name = name or folder.resolve().name
    if not _NAME.match(name):
        raise KeyFileError(f"key name {name!r} must be letters, digits, '.', '_' or '-' (at most 100); pass --name")
    public_path, secret_path = folder / f"{name}.key", folder / f"{name}.key_secret"
    if not force:
        for path in (public_path, secret_path):
            if path.exists():
                raise KeyFileError(f"{path} exists; keep it, or pass --force to replace the key pair")
    try:
        folder.mkdir(parents=True, exist_ok=True, mode=0o700)
        public, secret = (key.decode("ascii") for key in zmq.curve_keypair())
        _write(secret_path, _certificate(public, secret), 0o600)
        _write(public_path, _certificate(public, None), 0o644)
    except OSError as exc:
        where = exc.filename or folder
        raise KeyFileError(f"cannot write the key pair in {folder}: {exc.strerror or exc} ({where}); "
                           f"pick a folder you can write") from None
    return public_path, secret_path


def run(args) -> int:
    """`veer keys DIR [--name NAME] [--force]`; returns the exit code."""
    try:
        public_path, secret_path = write_key_pair(args.dir, args.name, force=args.force)
    except KeyFileError as exc:
        print(f"veer keys: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    print(f"public key: {public_path} (give it to the other side)")
    print(f"secret key: {secret_path} (mode 0600; keep it here)")
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    """``python -m veer.tools.keys``: the same as ``veer keys``."""
    import argparse

    parser = argparse.ArgumentParser(prog="veer keys", description=__doc__.split("\n\n")[0])
    add_arguments(parser)
    return run(parser.parse_args(argv))


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
