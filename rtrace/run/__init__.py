"""The run layer: a job file turned into outputs.

``job`` (parsing and checking the TOML job), ``inputs`` (the snapshots it names), ``views``, ``values``,
``checks`` and ``study`` (its sections), ``pipeline`` (planning and running), ``engine`` (trace and
observe of one view), ``products`` and ``study_products`` (the files written), ``colour_scales`` and
``series_cache`` (a series' shared picture scales), ``batch`` (series), ``manifest`` (resuming) and
``warmup`` (compiling the kernels ahead of a first run). It imports every layer below it and is imported
only by :mod:`rtrace.cli`.
"""
