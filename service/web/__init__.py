"""The HTTP layer: one module per resource, each a schema, one core call and a dump."""
