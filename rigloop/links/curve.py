"""CURVE keys for the daemon: where they live, who may connect, and the checks that
make a mistake fail closed.

Layout under the data directory::

    keys/server.key          the daemon's public key (give it to every rig)
    keys/server.key_secret   the daemon's secret key, mode 0600 (the daemon refuses a
                             secret that the group or others can read)
    keys/rigs/NAME.key       allow-list: one public key per rig; NAME is the rig's name,
                             and the name a connection is known by (never the payload's)
    keys/issued/NAME.key_secret   a rig's key pair made by ``rigloop keys rig NAME``,
                             mode 0600, to copy to that rig's controller and delete

Only the key *files* are handled here; the socket side (ZAP, ZAP_ENFORCE_DOMAIN, the
authenticator on the daemon's Context) is in ``links.zmq``.
"""

from __future__ import annotations

import ipaddress
import os
import re
import stat
from pathlib import Path

from ..errors import RigloopError
from . import zmq as zlink

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")

# the User-Id of a connection made with the daemon's own key pair: the operator on the
# daemon's machine (``rigloop status``); starts with '#', so no rig can be named so
OPERATOR = "#operator"


class SecurityError(RigloopError, PermissionError):
    """Keys are missing, unsafe or unusable; the daemon will not start like this."""


def keys_dir(data: str | os.PathLike) -> Path:
    return Path(data) / "keys"


def allow_dir(data: str | os.PathLike) -> Path:
    return keys_dir(data) / "rigs"


def _private_dir(path: Path) -> None:
    path.mkdir(parents=True, exist_ok=True)
    os.chmod(path, 0o700)


def _check_name(rig: str) -> str:
    if not isinstance(rig, str) or not _NAME.match(rig):
        raise SecurityError(f"rig name must be 1-64 letters, digits, '.', '_' or '-', starting with a letter or "
                            f"digit (got {rig!r})")
    return rig


def create_server_keys(data: str | os.PathLike, *, force: bool = False) -> tuple[Path, Path]:
    """Write the daemon's key pair (secret 0600) and an empty allow-list directory.

    Refuses to replace existing keys unless ``force`` (every rig would need the new key).
    """
    kdir = keys_dir(data)
    public, secret = kdir / "server.key", kdir / "server.key_secret"
    if (public.exists() or secret.exists()) and not force:
        raise SecurityError(f"{secret}: server keys exist already; pass --force to replace them "
                            "(every rig then needs the new server.key)")
    _private_dir(kdir)
    pub, sec = zlink.create_certificates(kdir, "server")
    os.chmod(sec, 0o600)  # zmq.auth writes 0644
    _private_dir(allow_dir(data))
    return Path(pub), Path(sec)


def create_rig_keys(data: str | os.PathLike, rig: str, *, force: bool = False) -> tuple[Path, Path]:
    """Make a rig's key pair: the public key goes on the allow-list, the pair (0600) in
    ``keys/issued/`` for the rig's controller."""
    _check_name(rig)
    adir, idir = allow_dir(data), keys_dir(data) / "issued"
    listed = adir / f"{rig}.key"
    if listed.exists() and not force:
        raise SecurityError(f"{listed}: rig {rig!r} has a key already; pass --force to replace it")
    _private_dir(keys_dir(data))
    _private_dir(adir)
    _private_dir(idir)
    pub, sec = zlink.create_certificates(idir, rig)
    os.chmod(sec, 0o600)
    os.replace(pub, listed)
    os.chmod(listed, 0o644)
    return listed, Path(sec)


def check_secret_file(path: Path) -> None:
    """Refuse a secret key file that is missing or readable by group/others."""
    try:
        st = path.stat()
    except FileNotFoundError:
        raise SecurityError(f"{path}: no server secret key; create one with `rigloop keys server --data DIR`") from None
    if st.st_mode & (stat.S_IRWXG | stat.S_IRWXO):
        raise SecurityError(f"{path}: the secret key is readable by group or others (mode "
                            f"{stat.S_IMODE(st.st_mode):04o}); run `chmod 600 {path}`")
    if hasattr(os, "geteuid") and st.st_uid != os.geteuid():
        raise SecurityError(f"{path}: the secret key belongs to uid {st.st_uid}, not to this user ({os.geteuid()})")


def load_server_keys(data: str | os.PathLike) -> zlink.CurveServerKeys:
    kdir = keys_dir(data)
    secret_path = kdir / "server.key_secret"
    check_secret_file(secret_path)
    try:
        public, secret = zlink.load_certificate(secret_path)
    except Exception as err:  # zmq.auth raises ValueError/OSError on damage
        raise SecurityError(f"{secret_path}: unreadable key file ({type(err).__name__})") from None
    if not secret or zlink.curve_public(secret) != public:
        raise SecurityError(f"{secret_path}: the public and secret keys do not belong together")
    return zlink.CurveServerKeys(public=public, secret=secret)


def load_allowed(data: str | os.PathLike) -> dict[bytes, str]:
    """The allow-list: Z85 public key -> rig name (file stem). A missing directory is an
    error (fail closed); an empty one is allowed but no rig can connect."""
    adir = allow_dir(data)
    if not adir.is_dir():
        raise SecurityError(f"{adir}: no allow-list directory of rig public keys; add rigs with "
                            "`rigloop keys rig NAME --data DIR`")
    allowed: dict[bytes, str] = {}
    for path in sorted(adir.glob("*.key")):
        rig = _check_name(path.stem)
        try:
            public, _ = zlink.load_certificate(path)
        except Exception as err:
            raise SecurityError(f"{path}: unreadable public key file ({type(err).__name__})") from None
        if public in allowed:
            raise SecurityError(f"{path}: the same key is listed for rigs {allowed[public]!r} and {rig!r}")
        allowed[public] = rig
    return allowed


def allow_list_stamp(data: str | os.PathLike) -> tuple | None:
    """What moves when the allow-list changes: the directory's mtime and each key file's
    name, mtime and size (None when the directory cannot be read). Cheap: the daemon
    compares it at most once a second to pick up added or removed rigs."""
    adir = allow_dir(data)
    try:
        files = tuple(sorted((p.name, st.st_mtime_ns, st.st_size) for p in adir.glob("*.key") for st in (p.stat(),)))
        return adir.stat().st_mtime_ns, files
    except OSError:
        return None


def load_client_keys(secret_path: str | os.PathLike, server_public: str | os.PathLike) -> zlink.CurveClientKeys:
    """A rig's keys from its ``NAME.key_secret`` file plus the server's ``server.key``."""
    public, secret = zlink.load_certificate(secret_path)
    server, _ = zlink.load_certificate(server_public)
    if secret is None:
        raise SecurityError(f"{secret_path}: holds no secret key")
    return zlink.CurveClientKeys(public=public, secret=secret, server=server)


def ephemeral_client(server_public: bytes) -> zlink.CurveClientKeys:
    public, secret = zlink.curve_keypair()
    return zlink.CurveClientKeys(public=public, secret=secret, server=server_public)


def is_loopback(endpoint: str) -> bool:
    """True only for tcp://127.0.0.1, tcp://localhost, tcp://[::1], ipc:// and inproc://.

    Every other host (including 0.0.0.0, a hostname, or 127.0.0.2) counts as reachable
    from elsewhere and needs CURVE or ``--insecure``.
    """
    if endpoint.startswith(("ipc://", "inproc://")):
        return True
    if not endpoint.startswith("tcp://"):
        return False
    host = endpoint[len("tcp://"):].rsplit(":", 1)[0].strip("[]")
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host) in (ipaddress.ip_address("127.0.0.1"), ipaddress.ip_address("::1"))
    except ValueError:
        return False
