"""What the MQTT collector and the MQTT republish store share: broker address,
TLS, credentials and the construction of a paho-mqtt 2.x client.

* ``mqtt://host[:port]`` (default port 1883) or ``mqtts://host[:port]`` (TLS,
  default port 8883).  A password in the URL is refused: it would end up in
  logs and ``check`` output; use ``password_env`` or ``password_file``.
* TLS checks the broker's certificate and host name unless
  ``insecure_skip_verify`` is set (for a lab bench only; it is logged).
* Clients are built with ``CallbackAPIVersion.VERSION2`` and MQTT 5 by default
  (``protocol: "3.1.1"`` selects the older protocol).

paho-mqtt and ssl errors met while building a client are translated here into
:class:`~probeflow.errors.ConfigError` naming the key that is wrong.
"""

from __future__ import annotations

import logging
import os
import socket
import ssl
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal
from urllib.parse import urlsplit

import paho.mqtt.client as paho
from paho.mqtt.enums import CallbackAPIVersion
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties
from pydantic import BaseModel, Field, SecretStr, field_validator, model_validator

from probeflow.errors import ConfigError

__all__ = [
    "BrokerAddress",
    "MqttConnectionConfig",
    "MqttTlsConfig",
    "build_client",
    "connect_properties",
    "parse_broker_url",
    "read_password",
]

_log = logging.getLogger("probeflow.mqtt")

SESSION_EXPIRY_MAX_S = 0xFFFFFFFF
"""Largest Session Expiry Interval MQTT 5 can carry (MQTT 5.0, 3.1.2.11.2)."""


@dataclass(frozen=True, slots=True)
class BrokerAddress:
    """Where a broker listens, taken apart from an ``mqtt://`` or ``mqtts://`` URL."""

    host: str
    port: int
    tls: bool
    username: str | None = None

    def __str__(self) -> str:  # never shows credentials
        return f"{'mqtts' if self.tls else 'mqtt'}://{self.host}:{self.port}"


def parse_broker_url(url: str) -> BrokerAddress:
    """Split ``mqtt://host:port`` / ``mqtts://host:port`` into a :class:`BrokerAddress`.

    Raises ValueError with a technician-readable message (pydantic turns it into
    a config error naming the ``url`` key).

    >>> parse_broker_url("mqtt://127.0.0.1:1884")
    BrokerAddress(host='127.0.0.1', port=1884, tls=False, username=None)
    >>> parse_broker_url("mqtts://broker.example.net").port
    8883
    """
    parts = urlsplit(url.strip())
    scheme = parts.scheme.lower()
    if scheme not in ("mqtt", "mqtts"):
        raise ValueError(f"expected a URL starting with mqtt:// or mqtts://, got {url!r}")
    if parts.password is not None:
        raise ValueError(
            "the URL holds a password; remove it and use password_env or password_file instead"
        )
    if not parts.hostname:
        raise ValueError(f"no broker host name in {url!r}")
    if parts.path not in ("", "/") or parts.query or parts.fragment:
        raise ValueError(f"a broker URL has only a host and a port, got {url!r}")
    try:
        port = parts.port
    except ValueError as exc:
        raise ValueError(f"the port in {url!r} is not a number between 1 and 65535") from exc
    tls = scheme == "mqtts"
    return BrokerAddress(
        host=parts.hostname, port=port or (8883 if tls else 1883), tls=tls,
        username=parts.username or None,
    )


class MqttTlsConfig(BaseModel):
    """TLS settings.  Without ``ca_file`` the system's trusted CAs are used."""

    model_config = {"extra": "forbid"}
    ca_file: str | None = None
    cert_file: str | None = None      # client certificate (optional)
    key_file: str | None = None       # its private key
    insecure_skip_verify: bool = False

    @model_validator(mode="after")
    def _key_with_cert(self) -> MqttTlsConfig:
        if self.key_file and not self.cert_file:
            raise ValueError("key_file is set but cert_file is not: give both or neither")
        return self


class MqttConnectionConfig(BaseModel):
    """Broker connection keys shared by the MQTT collector and the republish store."""

    model_config = {"extra": "forbid"}
    url: str
    client_id: str = Field(min_length=1, max_length=128)
    protocol: Literal["5", "3.1.1"] = "5"
    username: str | None = None
    password: SecretStr | None = None   # e.g. ${MQTT_PASSWORD}; never printed
    password_env: str | None = None
    password_file: str | None = None
    tls: MqttTlsConfig | None = None
    keepalive: int = Field(default=30, ge=5, le=65535)
    reconnect_min_s: float = Field(default=0.5, gt=0, le=60)
    reconnect_max_s: float = Field(default=30.0, gt=0, le=3600)

    @field_validator("url")
    @classmethod
    def _check_url(cls, value: str) -> str:
        parse_broker_url(value)
        return value

    @field_validator("protocol", mode="before")
    @classmethod
    def _protocol_as_text(cls, value: Any) -> Any:
        # YAML reads `protocol: 5` as an int and `protocol: 3.1.1` as a string.
        return str(value) if isinstance(value, int) else value

    @model_validator(mode="after")
    def _one_password_source(self) -> MqttConnectionConfig:
        sources = [k for k in ("password", "password_env", "password_file") if getattr(self, k)]
        if len(sources) > 1:
            raise ValueError(f"give only one of password, password_env, password_file (got {', '.join(sources)})")
        if self.reconnect_max_s < self.reconnect_min_s:
            raise ValueError("reconnect_max_s must not be smaller than reconnect_min_s")
        return self

    @property
    def address(self) -> BrokerAddress:
        return parse_broker_url(self.url)

    @property
    def mqtt5(self) -> bool:
        return self.protocol == "5"


def read_password(config: MqttConnectionConfig) -> str | None:
    """The broker password from the environment variable or file the config names.

    The value itself never appears in an error message.
    """
    if config.password is not None:
        return config.password.get_secret_value()
    if config.password_env:
        value = os.environ.get(config.password_env)
        if value is None:
            raise ConfigError(
                f"password_env: the environment variable {config.password_env} is not set",
                problems=[("password_env", f"environment variable {config.password_env} is not set")],
            )
        return value
    if config.password_file:
        try:
            text = Path(config.password_file).read_text(encoding="utf-8")
        except OSError as exc:
            raise ConfigError(
                f"password_file: cannot read {config.password_file}: {exc.strerror}",
                problems=[("password_file", f"cannot read {config.password_file}: {exc.strerror}")],
            ) from exc
        return text.rstrip("\r\n")
    return None


def connect_properties(config: MqttConnectionConfig, session_expiry_s: int) -> Properties | None:
    """MQTT 5 CONNECT properties asking the broker to keep the session.

    MQTT 5.0, 3.1.2.11.2: a Session Expiry Interval of 0 (the default) ends the
    session with the connection, so a persistent session needs a value > 0.
    """
    if not config.mqtt5:
        return None
    props = Properties(PacketTypes.CONNECT)
    props.SessionExpiryInterval = int(min(session_expiry_s, SESSION_EXPIRY_MAX_S))
    return props


def _tls_problem(key: str, message: str, exc: BaseException) -> ConfigError:
    err = ConfigError(f"tls.{key}: {message}", problems=[(f"tls.{key}", message)])
    err.__cause__ = exc
    return err


def _apply_tls(client: paho.Client, tls: MqttTlsConfig) -> None:
    for key in ("ca_file", "cert_file", "key_file"):
        path = getattr(tls, key)
        if path and not os.access(path, os.R_OK):
            raise ConfigError(
                f"tls.{key}: cannot read {path}", problems=[(f"tls.{key}", f"cannot read {path}")]
            )
    try:
        client.tls_set(
            ca_certs=tls.ca_file,
            certfile=tls.cert_file,
            keyfile=tls.key_file,
            cert_reqs=ssl.CERT_NONE if tls.insecure_skip_verify else ssl.CERT_REQUIRED,
            tls_version=ssl.PROTOCOL_TLS_CLIENT,
        )
    except ssl.SSLError as exc:
        raise _tls_problem("cert_file", f"the certificate or key could not be loaded ({exc.reason})", exc)
    except (OSError, ValueError) as exc:
        raise _tls_problem("ca_file", f"the TLS files could not be loaded ({exc})", exc)
    if tls.insecure_skip_verify:
        client.tls_insecure_set(True)
        _log.warning(
            "TLS certificate and host name checks are OFF (insecure_skip_verify): "
            "anyone on the network path can impersonate the broker"
        )


def build_client(
    config: MqttConnectionConfig,
    *,
    manual_ack: bool = False,
    persistent_session: bool = False,
) -> paho.Client:
    """A configured, not yet connected paho client (VERSION2 callbacks).

    ``persistent_session`` sets ``clean_session=False`` for MQTT 3.1.1; for MQTT 5
    the caller passes ``clean_start=False`` and :func:`connect_properties` to
    ``connect_async``.
    """
    address = config.address
    if config.mqtt5:
        client = paho.Client(
            callback_api_version=CallbackAPIVersion.VERSION2,
            client_id=config.client_id,
            protocol=paho.MQTTv5,
            manual_ack=manual_ack,
        )
    else:
        client = paho.Client(
            callback_api_version=CallbackAPIVersion.VERSION2,
            client_id=config.client_id,
            clean_session=not persistent_session,
            protocol=paho.MQTTv311,
            manual_ack=manual_ack,
        )
    if address.tls or config.tls is not None:
        _apply_tls(client, config.tls or MqttTlsConfig())
    username = config.username or address.username
    password = read_password(config)
    if username is not None or password is not None:
        client.username_pw_set(username or "", password)
    client.reconnect_delay_set(config.reconnect_min_s, config.reconnect_max_s)  # type: ignore[arg-type]
    client.on_socket_open = _no_delay
    return client


def _no_delay(client: paho.Client, userdata: Any, sock: Any) -> None:
    """Turn off Nagle's algorithm on the client's TCP socket (paho leaves it on).

    With it on, a small packet (an alert, a PUBACK) waits in the kernel while
    earlier bytes are unacknowledged, and the broker's delayed ACK can hold
    that for tens to hundreds of milliseconds (RFC 896, RFC 1122 4.2.3.2).
    Sockets without the option (WebSocket wrappers) are left as they are."""
    try:
        sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    except (AttributeError, OSError):
        return
