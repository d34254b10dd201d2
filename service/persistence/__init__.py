"""Persistence: typed SQLAlchemy models and small functions that take a session.

Repositories never commit; the HTTP views (the orchestrators) own the transaction.
"""
