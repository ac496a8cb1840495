"""railtap: calibrated, crash-safe logging of DC rails from a microcontroller ADC over USB serial."""

__version__ = "0.1.0"
