"""picker: choose parts on hand for single-transistor LC oscillators."""

__version__ = "0.1.0"
