"""Jobs: files in, products and a run record out.

One module per job, above :mod:`ttmap.products` and :mod:`ttmap.io` and
below :mod:`ttmap.cli`:

- :mod:`ttmap.jobs.options` - the option groups every job shares (reading,
  speed model, products, sites), frozen dataclasses with defaults from
  :mod:`ttmap.defaults`;
- :mod:`ttmap.jobs.plan` - the output-name plan of each job, used both to
  refuse existing outputs up front and to write them;
- :mod:`ttmap.jobs.record` - the one run-record builder and its validator
  (schema in ``docs/run-record.md``);
- :mod:`ttmap.jobs.map` - the map job (:func:`~ttmap.jobs.map.run_map_job`);
- :mod:`ttmap.jobs.sitemap` - the site-centred map job;
- :mod:`ttmap.jobs.batch` - many solves: serial, a local Dask cluster or a
  scheduler address;
- :mod:`ttmap.jobs.demo` - where the bundled, invented demo data lives.

Importing this package loads nothing heavy; each job imports what it needs.
"""

from __future__ import annotations

__all__: list[str] = []
