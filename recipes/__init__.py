"""thermoseed recipes: the application on top of ``pretrain`` and ``bridge``.

``recipes.scenarios`` holds our demo data generators (magnet-phase sorting, probe-drift watch,
XXZ neighbour warm start; they import ``thermoseed.pretrain`` only); the ``*.toml`` files are
the built-in recipes; ``config`` is the typed recipe (``recipe_values`` checks its values),
``sources`` loads the user's own data and circuit, ``plots`` draws convergence plots,
``pipeline`` runs a recipe, ``findings`` writes its plain-words summary, ``cli`` is the
``thermoseed`` command line.

Layer order, lowest first (a module imports only modules before it):
    scenarios -> recipe_values -> config -> sources -> plots -> neighbour -> findings ->
    pipeline -> cli_values -> commands -> cli -> __main__
"""

from thermoseed.pretrain.lazy import lazy_exports

#: Public names by defining module, imported on first use (PEP 562): the command line's
#: ``--help`` imports none of them.
EXPORTS = {
    "config": ("Recipe", "load_recipe", "validate_recipe"),
    "pipeline": ("run_recipe",),
    "plots": ("plot_compile_history", "plot_fit_history"),
    "scenarios.magnet_phase": ("magnet_phase_data",),
    "scenarios.neighbour_xxz": ("thermal_state", "xxz_terms"),
    "scenarios.probe_drift": ("probe_drift_data",),
    "sources": ("generated_data", "labelled_files", "recipe_circuit", "recipe_data"),
}
__getattr__, __dir__, __all__ = lazy_exports(__name__, EXPORTS)
