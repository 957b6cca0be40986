"""Flask API and dashboard. Build with ``create_app``; never a module-level app."""
from service.app import create_app

__all__ = ["create_app"]
