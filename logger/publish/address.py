"""Where a broker is and how to log in: ``mqtt://HOST[:PORT]/PREFIX`` (``mqtts://`` for TLS), secrets from the
environment.

A user name and password never sit in the URL: a command line shows in the process list, and the URL is kept
in ``_run.json``. They come from ``RAILTAP_MQTT_USER`` and ``RAILTAP_MQTT_PASSWORD``, or the password from the
file ``RAILTAP_MQTT_PASSWORD_FILE`` names; ``RAILTAP_MQTT_CA`` names a CA bundle for a broker whose certificate
the system does not trust.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import urlsplit

DEFAULT_PREFIX = "railtap"
PORTS = {"mqtt": 1883, "mqtts": 8883}
_LEVEL = re.compile(r"^[A-Za-z0-9._-]+$")


class AddressError(ValueError):
    """A broker URL, bench name or secret that cannot be used; the message is one line saying what to do."""


@dataclass(frozen=True)
class Broker:
    """A broker and the topic prefix under which benches publish."""

    host: str
    port: int
    prefix: str
    tls: bool = False
    user: str | None = field(default=None, repr=False)
    password: str | None = field(default=None, repr=False)
    ca_file: str | None = None

    @property
    def url(self) -> str:
        """The address without secrets: what logs, screens and ``_run.json`` show."""
        host = f"[{self.host}]" if ":" in self.host else self.host
        return f"{'mqtts' if self.tls else 'mqtt'}://{host}:{self.port}/{self.prefix}"


def parse_broker(url: str, environ: dict[str, str] | None = None) -> Broker:
    """Read ``mqtt://HOST[:PORT]/PREFIX``; the prefix defaults to ``railtap``. Raises :class:`AddressError`."""
    env = os.environ if environ is None else environ
    parts = urlsplit(url)
    if parts.scheme not in PORTS:
        raise AddressError(f"{url!r}: a broker is mqtt://HOST[:PORT]/PREFIX, or mqtts:// for TLS")
    if parts.username is not None or parts.password is not None:
        raise AddressError(f"{parts.scheme}://{parts.hostname}...: put no user or password in the URL (it shows in "
                           "the process list); set RAILTAP_MQTT_USER and RAILTAP_MQTT_PASSWORD or "
                           "RAILTAP_MQTT_PASSWORD_FILE")
    if not parts.hostname:
        raise AddressError(f"{url!r}: no broker host; write e.g. mqtt://192.168.1.20/lab")
    try:
        port = parts.port or PORTS[parts.scheme]
    except ValueError:
        raise AddressError(f"{url!r}: the port is not a number from 1 to 65535") from None
    prefix = parts.path.strip("/") or DEFAULT_PREFIX
    for level in prefix.split("/"):
        if not _LEVEL.match(level):
            raise AddressError(f"{url!r}: the topic prefix {prefix!r} may hold letters, digits, '.', '_' and '-' "
                               "between slashes")
    if parts.query or parts.fragment:
        raise AddressError(f"{url!r}: nothing may follow the prefix (no ? or #)")
    return Broker(parts.hostname, port, prefix, parts.scheme == "mqtts", *_secrets(env))


def _secrets(env: dict[str, str]) -> tuple[str | None, str | None, str | None]:
    user = env.get("RAILTAP_MQTT_USER") or None
    password = env.get("RAILTAP_MQTT_PASSWORD") or None
    if password is None and env.get("RAILTAP_MQTT_PASSWORD_FILE"):
        path = Path(env["RAILTAP_MQTT_PASSWORD_FILE"])
        try:
            password = path.read_text(encoding="utf-8").strip()
        except OSError as exc:
            raise AddressError(f"RAILTAP_MQTT_PASSWORD_FILE {path}: cannot read it ({exc.strerror or exc})") from None
    if password is not None and user is None:
        raise AddressError("a broker password is set but no user: set RAILTAP_MQTT_USER too")
    ca = env.get("RAILTAP_MQTT_CA") or None
    if ca is not None and not Path(ca).is_file():
        raise AddressError(f"RAILTAP_MQTT_CA {ca}: no such file (a PEM bundle of the CA that signed the broker's "
                           "certificate)")
    return user, password, ca


def slug(name: str) -> str:
    """Any name made into one topic level (for a default: the rig's name or the run's label)."""
    return re.sub(r"[^A-Za-z0-9._-]+", "-", name).strip("-") or "bench"


def bench_name(name: str) -> str:
    """A bench's name as one topic level: letters, digits, '.', '_' and '-'; spaces become '-'."""
    level = re.sub(r"\s+", "-", name.strip())
    if not _LEVEL.match(level):
        raise AddressError(f"bench name {name!r}: use letters, digits, '.', '_' and '-' (it becomes a topic level)")
    return level
