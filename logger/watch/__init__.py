"""The lab's view: every bench publishing under a broker's prefix, on one screen (``railtap watch``)."""

from logger.watch.app import WatchApp
from logger.watch.model import Lab

__all__ = ["Lab", "WatchApp"]
