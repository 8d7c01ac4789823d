"""thermoseed recipes: the application on top of ``pretrain`` and ``bridge``.

``recipes.scenarios`` holds our demo data generators (magnet-phase sorting, probe-drift watch,
XXZ neighbour warm start; they import ``thermoseed.pretrain`` only); the ``*.toml`` files are
the built-in recipes; ``config`` is the typed recipe, ``pipeline`` runs one, ``findings``
writes its plain-words summary, ``cli`` is the ``thermoseed`` command line.

Layer order, lowest first (a module imports only modules before it):
    scenarios -> config -> neighbour -> findings -> pipeline -> cli -> __main__
"""
