"""The package version, at the top floor's side so that any floor can name it without importing upwards."""

__version__ = "0.1.0"
