"""Store stage: the DuckDB edge (schema, connections, transactional writes)."""
from .database import connect_read, connect_write, transaction
from .schema import create_schema

__all__ = ["connect_read", "connect_write", "transaction", "create_schema"]
