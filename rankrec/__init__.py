"""rankrec: personalised PageRank recommendations for an internal wiki."""

__version__ = "0.1.0"
