"""rtvoice: a real-time plucked-string instrument built from string modes."""

__version__ = "0.1.0"
