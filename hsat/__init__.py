"""hsat: scores home sleep apnea test (HSAT) recordings.

The pipeline is a chain of stages, each a module that takes data and returns data::

    read (hsat.io)  ->  condition (hsat.condition)  ->  breaths (hsat.breaths)
        ->  events (hsat.events, driven by rule sets in rules/)  ->  metrics (hsat.metrics)
        ->  outputs (hsat.outputs, hsat.report)

``hsat.api`` strings the stages together for one night; the command line (``hsat.cli``)
and the Makefile are thin layers over it.
"""

__version__ = "0.1.0"
