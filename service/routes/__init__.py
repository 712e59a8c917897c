"""The service's routers, one per resource: analyses (REST), reports (share links), pages."""

from __future__ import annotations

__all__: list[str] = []
