"""Persistence: SQLAlchemy 2 models, repository functions and Alembic migrations.

Imports SQLAlchemy, numpy and the standard library; never anything from
``service`` (the HTTP and job layers depend on storage, not the reverse).
"""
