"""Web layer of exomap: the FastAPI app (``exomap.web.app.create_app``), the JSON API under ``/api/v1``, the
scenario store (SQLite), the offline API docs page and the browser pages.

Modules: ``settings`` (EXOMAP_* settings), ``app`` (factory and middleware order), ``api`` (routes),
``models`` (request bodies), ``service`` (scenario lookup, SI parameters, limits, cache, pool), ``jobs`` (the
computations, run in worker processes), ``runner`` (worker pool and time budget), ``cache`` (answer LRU),
``store`` (scenarios), ``errors`` (the one error shape), ``middleware`` (body limit, security headers),
``apidocs`` (``/api/docs``), ``pages`` and ``urls`` (the pages). Nothing here runs at import time.
"""
