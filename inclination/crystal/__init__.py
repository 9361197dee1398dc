"""The crystal side of the job: orientations, symmetry, lattices, CSL relations.

Owns everything that is true of a crystal whatever map it is seen on (docs/conventions.md §3–§4):
``rotations`` (Euler, matrix, quaternion, axis–angle), ``symmetry`` (the 11 Laue classes and
disorientation), ``lattice`` (cells, indices, plane normals, families, phases) and ``csl``
(coincidence-site-lattice relations and hexagonal twins). Nothing here reads a file or knows of
a map.
"""
