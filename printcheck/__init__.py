"""printcheck: count and judge scraping prints from phone photos."""

__version__ = "0.1.0"
