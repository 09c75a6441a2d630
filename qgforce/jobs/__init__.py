"""The jobs the command line runs, one small module each, as plain functions over the library.

* :mod:`.choices`: option parsers shared by the command line and the jobs (forms, levels, times, region);
* :mod:`.config`: the command line's TOML option files (read and checked, one clear line per fault);
* :mod:`.describe`: ``inspect`` (find and open the inputs, describe them and what they allow);
* :mod:`.compute`: ``compute`` (the diagnostics of a job as one dataset, written to CF NetCDF);
* :mod:`.maps`: ``maps`` (plan, then draw, the PNG maps);
* :mod:`.demo`: ``demo`` (everything on the invented demo scenario);
* :mod:`.section`: ``section`` (great-circle cross-sections to PNG);
* :mod:`.runpage`: the run page (``index.html`` beside a run's PNGs).

:mod:`qgforce.workflow` re-exports every name for code written against it.
"""
