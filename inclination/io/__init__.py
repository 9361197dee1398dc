"""Reading and writing what the user gives: the job file, its schemas, map files.

Owns parsing and validation at the input edge (docs/architecture.md): ``job`` (the job file,
checked against ``schemas/job.schema.json``, its phases built as one typed
:class:`~inclination.crystal.phases.Phases`), ``schemas`` (finding the shipped JSON Schemas),
``text`` (text tables and grid placement from coordinates), ``arrays`` (npz and TIFF arrays
with the TIFF's sidecar) and ``writers`` (maps written back in the declared frame).
Conversion of orientations into the sample frame happens once, in :mod:`inclination.maps`,
on the arrays read here.
"""
