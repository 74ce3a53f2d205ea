"""The ``phasewright`` command line: ``check`` files locally, list the catalogue, ``generate`` parts, and
``batch``-check a folder through the API (its HTTP client is ``services.cli.batch``)."""

from services.cli.common import parse_freqs
from services.cli.main import build_parser, main

__all__ = ["build_parser", "main", "parse_freqs"]
