"""Job kinds, one module each; every module exposes ``KIND`` (listed in ``registry.py``)."""
