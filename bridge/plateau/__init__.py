"""The plateau lab: initialisation strategies, gradient probes, statistics, sweeps and
reports (on top of the bridge library; ``bridge/__init__.py`` lists the layer order)."""
