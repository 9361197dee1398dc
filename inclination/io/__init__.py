"""Reading what the user gives: the job file, its schemas, text tables and array files.

Owns parsing and validation at the input edge (docs/architecture.md): ``job`` (the job file,
checked against ``schemas/job.schema.json``), ``schemas`` (finding the shipped JSON Schemas) and
``readers`` (text tables, grid placement, npz and TIFF arrays). Conversion of orientations into
the sample frame happens once, in :mod:`inclination.maps`, on the arrays read here.
"""
