"""fitwatch: keep a fitted linear planning model honest, night after night."""

__version__ = "0.1.0"
