"""The domain core stays framework-free: nothing under services/ imports Django or the web app."""

import re
from pathlib import Path

SERVICES = Path(__file__).resolve().parents[2] / "services"


def test_services_never_import_django():
    """No module in services/ imports django or webapp (the core must run without a server)."""
    pattern = re.compile(r"^\s*(import|from)\s+(django|webapp)\b", re.M)
    offenders = [str(p.relative_to(SERVICES)) for p in SERVICES.rglob("*.py") if pattern.search(p.read_text())]
    assert offenders == []
