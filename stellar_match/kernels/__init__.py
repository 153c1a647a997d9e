"""Compiled kernels (numba): small, plain-array functions on the solver's hot path.

The kernels know no Python objects: they take arrays and scalars and return
arrays.  Meaning (units, names, statuses as words, validation) lives in the
modules that call them:

* :mod:`.eos_pieces` evaluates one EOS piece of a given piece type from its
  coefficient row (every EOS family lowers itself to such rows);
* :mod:`.tov_stepping` integrates one star at a time with adaptive
  Dormand-Prince steps, the error checked at every step.

Compiled with ``cache=True`` (numba's cache: beside the source, or in the
user's cache directory for a read-only install) and without ``fastmath``, so
a star's bits depend on its inputs only.
"""
