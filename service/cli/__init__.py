"""The ``bellwether`` console script: serve, worker, migrate, keys, demo.

Only this package and ``service.app`` build :class:`service.settings.Settings`.
"""
