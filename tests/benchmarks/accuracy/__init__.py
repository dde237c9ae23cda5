"""Supporting code of the accuracy benchmark (``tests/benchmarks/bench_accuracy.py``).

One concept per module: invented cells (``cells``), load shapes (``loads``), exact
simulation (``truth``), the transducer (``transducer``), record variants
(``variants``), record assembly (``records``), continuous models and their exact
discretisation (``models``), compiled Kalman loops (``kalman``), the fitted reference
filters (``yardsticks``), metrics (``scoring``) and the adapter to the project's
observer (``ours``). Units are SI throughout.
"""
