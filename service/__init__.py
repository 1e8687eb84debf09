"""Bellwether: the HTTP service, its job runner, analytics and intake.

Subpackages: ``api`` (HTTP), ``jobs`` (queue workers), ``analytics`` (pure
functions over graphs), ``intake`` (file readers), ``cli`` (console script).
"""
