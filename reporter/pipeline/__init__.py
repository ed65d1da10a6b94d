"""The build pipeline, one road for a single portfolio and a fund.

A single portfolio is a fund of one part with no total. Each part (the single portfolio, or
the total fund and each mandate) goes through :func:`reporter.pipeline.part.assemble_part`;
a fund adds the figures that join its parts (:mod:`reporter.pipeline.fund`).

- :mod:`~reporter.pipeline.stages`: the stages every pack shares (read, input hashes, the
  action log, the build time);
- :mod:`~reporter.pipeline.part`: one part, from checked inputs to exported charts;
- :mod:`~reporter.pipeline.single` and :mod:`~reporter.pipeline.fund`: the parts of a single
  portfolio and of a fund, and what each assembles into;
- :mod:`~reporter.pipeline.assemble`: read, validate, then every part, then the whole;
- :mod:`~reporter.pipeline.results`: the results files of an assembled pack.

Nothing here writes a file: :mod:`reporter.build` renders and writes.
"""
