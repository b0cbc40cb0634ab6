"""What the tests share beyond fixtures: networks, references and paths (``from support import ...``;
pyproject.toml puts tests/ on the import path).

- :mod:`.paths`: the project root and the published problems outside it;
- :mod:`.networks`: small canned networks with known answers, for every method;
- :mod:`.tables`: the hand-written instance tables the validation tests vary;
- :mod:`.tiny`: a two-leg instance folder and a benchmark file for the command-line tests;
- :mod:`.family`: a randomized family of networks and an independent certificate (scipy.stats);
- :mod:`.hubspoke`: the published hub-and-spoke problems (reader and published values);
- :mod:`.published_dynamic`: the dynamic policies on one published problem;
- :mod:`.network_dp`: the exact network dynamic program of small networks;
- :mod:`.sweeps`: how a long parametrized sweep is split between the default run and the slow one.
"""
