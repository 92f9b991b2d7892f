"""Uncertainty ensembles: many members of a scenario across parameter ranges, on dask.

A scenario's ``[uncertainty]`` section lists uncertain parameters by dotted key
with a range and a distribution, the number of members and the sampling
design. ``preyscape ensemble SCENARIO`` runs every member of the baseline and
of the chosen variants on a dask.distributed cluster (a local one by default,
or any scheduler by address), streams each member's summaries into a zarr
store as it finishes, and writes the summaries across members: the
probability of persistence, the probability of change against the baseline
(gains and losses), robust change maps, the ranking of alternatives with
intervals and the sensitivity of landscape outcomes to each parameter.

Modules, in the order the data flows:

- :mod:`.design`: distributions, Latin hypercube and Saltelli designs, member seeds;
- :mod:`.members`: a variant's landscape built once; a member's setup derived from
  it; one member's run and its summaries;
- :mod:`.store`: the member store (zarr), the parameter table;
- :mod:`.engine`: running the members on dask.distributed (or in this process);
- :mod:`.summaries`: change classification of a member pair, probabilities across
  members, the ranking with intervals;
- :mod:`.sensitivity`: partial rank correlation coefficients and Sobol' indices;
- :mod:`.output`: the summary folder (GeoTIFFs, maps, tables, plots) and the
  report's uncertainty section.

See docs/ensembles.md.
"""
