"""Storage: the only layer that knows SQL. Faces use the read functions in queries."""
