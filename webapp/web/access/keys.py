"""The team access key itself: the start-up policy, key files, the server secret, cookie signing.

* At start-up, :func:`access_policy` decides from the listening address whether
  an access key is needed. A loopback address (127.0.0.0/8, ``::1``,
  ``localhost``) is reachable only from the same machine, so no key is needed.
  Any other address is reachable by other people, so a key is required unless
  the operator explicitly opts out with ``--no-access-key`` (then
  :func:`warning_text` is printed). A missing or weak key raises
  :class:`AccessConfigError`, whose message says what to do.
* The cookie is signed with :class:`itsdangerous.URLSafeTimedSerializer` using a
  random server secret kept in ``<data dir>/session-secret`` (mode 0600), which
  every worker process reads, so a cookie issued by one worker is accepted by
  all. The cookie carries a fingerprint of the access key, an HMAC of the key
  under the server secret: changing the key signs everybody out, and a stolen
  cookie does not help anyone guess the key offline.
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
import logging
import os
import secrets
import stat
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Mapping

from itsdangerous import URLSafeTimedSerializer

__all__ = [
    "ACCESS_KEY_ENV",
    "MIN_KEY_LENGTH",
    "MAX_KEY_LENGTH",
    "GENERATE_KEY_COMMAND",
    "SECRET_FILE_NAME",
    "AccessConfigError",
    "AccessPolicy",
    "is_loopback_host",
    "access_policy",
    "warning_text",
    "check_key",
    "resolve_access_key",
    "read_access_key_file",
    "key_file_warning",
    "load_or_create_secret",
    "cookie_serializer",
    "key_fingerprint",
]

ACCESS_KEY_ENV = "ORDINATE_ACCESS_KEY"
MIN_KEY_LENGTH = 16
MAX_KEY_LENGTH = 1024
GENERATE_KEY_COMMAND = 'python -c "import secrets; print(secrets.token_urlsafe(24))"'

SECRET_FILE_NAME = "session-secret"
SECRET_BYTES = 32
_COOKIE_SALT = "ordinate-access-cookie"

log = logging.getLogger("ordinate.access")


class AccessConfigError(ValueError):
    """The access settings cannot be used; the message tells the operator what to change."""


# --- start-up: the policy ------------------------------------------------------


@dataclass(frozen=True)
class AccessPolicy:
    """What :func:`access_policy` decided for one server.

    ``access_key`` is the key to require (``None``: no key). ``open_access`` is
    true only when a non-loopback address is served without a key because the
    operator asked for that; :attr:`warning` is then the text to print.
    """

    host: str
    loopback: bool
    access_key: str | None = field(repr=False)
    open_access: bool

    @property
    def requires_key(self) -> bool:
        return self.access_key is not None

    @property
    def warning(self) -> str | None:
        return warning_text(self.host) if self.open_access else None


def is_loopback_host(host: str) -> bool:
    """True for addresses only this machine can reach: 127.0.0.0/8, ``::1``, ``localhost``.

    Anything else, including ``0.0.0.0``, ``::``, an empty host and every other
    host name, counts as reachable from the network. Host names are not
    resolved: a name that happens to point at 127.0.0.1 today is still treated
    as a network address (the cautious reading).
    """
    name = str(host or "").strip().lower()
    if name.startswith("[") and name.endswith("]"):
        name = name[1:-1]
    if name in ("localhost", "localhost."):
        return True
    try:
        address = ipaddress.ip_address(name)
    except ValueError:
        return False
    mapped = getattr(address, "ipv4_mapped", None)
    return bool(address.is_loopback or (mapped is not None and mapped.is_loopback))


def access_policy(host: str, access_key: str | None, open_access: bool) -> AccessPolicy:
    """Decide at start-up whether this server requires the team access key.

    Parameters
    ----------
    host : str
        The address the server listens on (``--host``).
    access_key : str or None
        The resolved key (see :func:`resolve_access_key`); surrounding
        whitespace is ignored.
    open_access : bool
        The operator's explicit ``--no-access-key``.

    Raises
    ------
    AccessConfigError
        A non-loopback host without a key and without ``--no-access-key``; a key
        together with ``--no-access-key``; a key that is too short or too long or
        contains control characters.
    """
    key = access_key.strip() if isinstance(access_key, str) else None
    loopback = is_loopback_host(host)
    if key is not None and open_access:
        raise AccessConfigError(
            f"--no-access-key was given, but an access key is also set ({ACCESS_KEY_ENV} or "
            "--access-key-file). Remove one of them."
        )
    if key is not None:
        check_key(key)
        return AccessPolicy(host, loopback, key, False)
    if loopback:
        return AccessPolicy(host, loopback, None, False)
    if open_access:
        return AccessPolicy(host, loopback, None, True)
    raise AccessConfigError(
        f"Ordinate would be reachable from the network at {host}, so it needs a team access key. "
        f"Set the environment variable {ACCESS_KEY_ENV}, or pass --access-key-file FILE "
        f"(make one with: {GENERATE_KEY_COMMAND}); or serve on 127.0.0.1; or, on a network you trust "
        "completely, pass --no-access-key."
    )


def warning_text(host: str | None = None) -> str:
    """The warning to print when a network address is served without an access key."""
    where = f"on {host} " if host else ""
    return (
        f"WARNING: Ordinate is serving {where}WITHOUT an access key (--no-access-key). "
        "Anyone who can reach this address can upload files and open every dataset and saved view "
        "whose link they have. Use this only on a network you trust completely; otherwise set "
        f"{ACCESS_KEY_ENV} or pass --access-key-file."
    )


def check_key(key: str) -> None:
    if len(key) < MIN_KEY_LENGTH:
        raise AccessConfigError(
            f"The access key is {len(key)} characters long; use at least {MIN_KEY_LENGTH}. "
            f"Make a good one with: {GENERATE_KEY_COMMAND}"
        )
    if len(key) > MAX_KEY_LENGTH:
        raise AccessConfigError(f"The access key is longer than {MAX_KEY_LENGTH} characters; use a shorter one.")
    if any(not ch.isprintable() for ch in key):
        raise AccessConfigError(
            "The access key contains a line break or another control character; "
            "put the key on one line by itself."
        )


def resolve_access_key(key_file: str | os.PathLike | None = None,
                       environ: Mapping[str, str] | None = None) -> str | None:
    """The access key from ``--access-key-file`` if given, else from :data:`ACCESS_KEY_ENV`.

    The command-line file wins over the environment. An empty or unset
    environment variable means "no key". The key is not validated here; pass it
    to :func:`access_policy`.
    """
    if key_file is not None:
        return read_access_key_file(key_file)
    environ = os.environ if environ is None else environ
    value = environ.get(ACCESS_KEY_ENV, "").strip()
    return value or None


def read_access_key_file(path: str | os.PathLike) -> str:
    """Read a key file: the whole file, surrounding whitespace removed.

    Raises :class:`AccessConfigError` when the file cannot be read or is empty.
    A file readable by other users is accepted; see :func:`key_file_warning`.
    """
    try:
        key = Path(path).read_text(encoding="utf-8").strip()
    except FileNotFoundError:
        raise AccessConfigError(f"The access key file {path} does not exist.") from None
    except (OSError, UnicodeDecodeError) as error:
        reason = getattr(error, "strerror", None) or str(error)
        raise AccessConfigError(f"The access key file {path} cannot be read ({reason}).") from None
    if not key:
        raise AccessConfigError(
            f"The access key file {path} is empty. Put the key in it, for example: "
            f"{GENERATE_KEY_COMMAND} > {path}"
        )
    return key


def key_file_warning(path: str | os.PathLike) -> str | None:
    """A warning when the key file can be read by its group or by other users, else None.

    Only a warning: on some systems (containers, shared service accounts) this
    is deliberate. On Windows the POSIX mode bits say nothing, so no warning.
    """
    if os.name != "posix":
        return None
    try:
        mode = Path(path).stat().st_mode
    except OSError:
        return None
    if mode & (stat.S_IRWXG | stat.S_IRWXO):
        return (
            f"Warning: the access key file {path} can be read by other users "
            f"(mode {stat.S_IMODE(mode):o}). Consider: chmod 600 {path}"
        )
    return None


# --- serving: the shared secret ------------------------------------------------


def load_or_create_secret(secret_dir: str | os.PathLike) -> bytes:
    """The server's cookie-signing secret, created on first start.

    The file ``secret_dir / "session-secret"`` holds 32 random bytes
    (:func:`secrets.token_bytes`), mode 0600. Several workers may start at the
    same moment: each writes a complete candidate to a private temporary file and
    tries to hard-link it to the final name; ``link`` fails if the name exists,
    so exactly one candidate wins and nobody can ever read a half-written file.
    Everybody then reads the winner. Deleting the file (and restarting) signs
    everybody out.
    """
    directory = Path(secret_dir)
    directory.mkdir(parents=True, exist_ok=True)
    target = directory / SECRET_FILE_NAME
    if not target.exists():
        # mkstemp creates the file with mode 0600; the hard link keeps that mode.
        fd, temp_name = tempfile.mkstemp(dir=directory, prefix=".session-secret-", suffix=".part")
        try:
            with os.fdopen(fd, "wb") as handle:
                handle.write(secrets.token_bytes(SECRET_BYTES))
                handle.flush()
                os.fsync(handle.fileno())
            try:
                os.link(temp_name, target)
            except FileExistsError:
                pass  # another worker won the race; use its secret
            except OSError:
                # No hard links on this file system: fall back to an exclusive create.
                _create_exclusive(target, Path(temp_name).read_bytes())
        finally:
            os.unlink(temp_name)
    secret = _read_secret(target)
    if len(secret) != SECRET_BYTES:
        raise AccessConfigError(
            f"The session secret {target} is damaged ({len(secret)} bytes instead of {SECRET_BYTES}). "
            "Stop the server, delete that file and start again (everyone signs in again)."
        )
    if os.name == "posix" and stat.S_IMODE(target.stat().st_mode) & 0o077:
        log.warning("the session secret %s can be read by other users; run: chmod 600 %s", target, target)
    return secret


def _create_exclusive(target: Path, data: bytes) -> None:
    try:
        fd = os.open(target, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    except FileExistsError:
        return
    with os.fdopen(fd, "wb") as handle:
        handle.write(data)
        handle.flush()
        os.fsync(handle.fileno())


def _read_secret(target: Path, attempts: int = 20) -> bytes:
    # Only the exclusive-create fallback can expose a file still being written;
    # give its writer a moment before calling it damaged.
    for _ in range(attempts):
        secret = target.read_bytes()
        if len(secret) == SECRET_BYTES:
            return secret
        time.sleep(0.05)
    return secret


def cookie_serializer(secret: bytes, salt: str = _COOKIE_SALT) -> URLSafeTimedSerializer:
    """A signer for a cookie: HMAC-SHA256 under the server secret, with a timestamp.

    ``salt`` keeps cookies of different purposes apart (an access cookie is
    never accepted as a manage cookie, and the other way round).
    """
    return URLSafeTimedSerializer(secret, salt=salt, signer_kwargs={"digest_method": hashlib.sha256})


def key_fingerprint(secret: bytes, key: str) -> str:
    """A short HMAC of a key under the server secret: identifies the key, reveals nothing."""
    return hmac.new(secret, key.encode("utf-8"), hashlib.sha256).hexdigest()[:16]
