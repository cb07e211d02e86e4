"""bidstats: exact order-statistics answers to auction-design questions."""


def create_app(config=None):
    """Build the WSGI app (imported lazily, so ``service.client`` needs no Flask)."""
    from .app import create_app as build

    return build(config)


__all__ = ["create_app"]
