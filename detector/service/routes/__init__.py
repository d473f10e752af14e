"""Routers of the service, one module per resource."""
