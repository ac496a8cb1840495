"""A paho-mqtt client set up for a broker: login, TLS, a last will. Publishers and watchers both make theirs here."""

from __future__ import annotations

import os
import socket
import ssl

import paho.mqtt.client as mqtt

from logger.publish.address import Broker


def make_client(broker: Broker, role: str, will: tuple[str, bytes] | None = None,
                protocol: int = mqtt.MQTTv311) -> mqtt.Client:
    """A client that has not connected yet. ``role`` names it to the broker (with this process's id, so two
    processes never share an id and knock each other off); ``will`` is a retained QoS 1 message the broker
    publishes if this client vanishes without saying goodbye."""
    client_id = f"railtap-{role}-{socket.gethostname()}-{os.getpid()}"
    client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=client_id, protocol=protocol,
                         clean_session=True if protocol != mqtt.MQTTv5 else None)
    if broker.user is not None:
        client.username_pw_set(broker.user, broker.password)
    if broker.tls:
        client.tls_set(ca_certs=broker.ca_file, cert_reqs=ssl.CERT_REQUIRED)
    if will is not None:
        client.will_set(will[0], will[1], qos=1, retain=True)
    return client


def refusal(reason: object) -> str:
    """A CONNACK refusal in words a user can act on."""
    text = str(reason).lower()
    if "not authori" in text or "bad user" in text or "password" in text:
        return (f"the broker refused the login ({reason}): check RAILTAP_MQTT_USER and RAILTAP_MQTT_PASSWORD "
                "(or RAILTAP_MQTT_PASSWORD_FILE)")
    return f"the broker refused the connection ({reason})"


def unreachable(broker: Broker, exc: Exception) -> str:
    """Why a connection to the broker failed, in words a user can act on."""
    if isinstance(exc, ssl.SSLCertVerificationError):
        return (f"the certificate of {broker.host}:{broker.port} is not trusted ({exc.verify_message}): set "
                "RAILTAP_MQTT_CA to the CA that signed it")
    return f"cannot reach {broker.host}:{broker.port}: {getattr(exc, 'strerror', None) or exc}"
