"""HTTP routes of API v1, one module per resource."""
