"""A bench published to an MQTT broker (``--publish``): the topic tree, its messages, and the publisher outlet."""

from logger.publish.address import AddressError, Broker, bench_name, parse_broker, slug
from logger.publish.publisher import Publisher

__all__ = ["AddressError", "Broker", "Publisher", "bench_name", "parse_broker", "slug"]
