"""The engines a warehouse runs on, behind one small interface (``base.Engine``).

- ``embedded``: a DuckDB file (the default, and the sample);
- ``server``: any SQLAlchemy URL (PostgreSQL is tested for real);
- ``spark``: Apache Spark through pyspark (``spark://local[N]`` or Spark Connect ``sc://HOST``).

Only this package (and ``reachlist.warehouse``, which holds one engine) imports a database
driver; query code never asks which engine it runs on: what differs is data (``query.Dialect``).
"""
