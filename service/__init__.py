"""HTTP layer of lacuna: app factory (``service.app.create_app``), routes, problem errors,
queue submission, and the ``serve`` and ``openapi`` commands (``python -m service``).

Importing the package imports nothing else, so a module of it pays only for what it uses."""
