"""chirpcast service layer: the report builder, and later the command line and web pages."""

from __future__ import annotations

__all__: list[str] = []
