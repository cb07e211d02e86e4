"""bidstats: exact order-statistics answers to auction-design questions."""
from .app import create_app

__all__ = ["create_app"]
