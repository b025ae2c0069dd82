"""reportlab documents rendered from plain data (dataclasses a service builds)."""
