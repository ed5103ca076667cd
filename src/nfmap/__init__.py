"""nfmap: near-field RF exposure maps around small transmitting stations."""

__version__ = "0.1.0"
