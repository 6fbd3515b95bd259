"""The run layer: a job file turned into outputs.

``job`` (parsing and checking the TOML job into a frozen ``Job``), ``schema`` (its tables and keys),
``sections``, ``snapshot_sections`` and ``study`` (one typed, frozen section per table, each with its parser),
``inputs`` (the snapshots it names), ``views``, ``values`` and ``checks`` (values and their checks),
``pipeline`` (planning and running), ``engine`` (trace and observe of one view), ``products`` and
``study_products`` (the files written), ``colour_scales`` and ``series_cache`` (a series' shared picture
scales), ``batch`` (series), ``manifest`` (resuming) and ``warmup`` (compiling the kernels ahead of a first
run). It imports every layer below it and is imported only by :mod:`rtrace.cli`.
"""
