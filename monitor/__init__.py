"""convmon: plant-data conversion monitor for batch reactors."""

__version__ = "0.1.0"
