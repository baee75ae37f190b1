"""Chemical elements: descriptors, safety flags and host-relative terms.

One module per concept, data flowing one way:

* :mod:`~dopantgap.elements.descriptors`: every number known about each element, read
  from mendeleev's bundled data, with unit, source and imputation rule;
* :mod:`~dopantgap.elements.flags`: radioactive and toxic elements, for cautions;
* :mod:`~dopantgap.elements.host_relative`: the host atoms an impurity at a site is
  compared with, and the impurity-minus-reference terms.

The public names of all three are importable from ``dopantgap.elements`` itself, and so,
for older callers, are the host-formula functions that now live in
:mod:`dopantgap.hosts.formulas` (``parse_formula``, ``read_host_file``,
``host_compositions``).
"""

from dopantgap.elements.descriptors import (
    DESCRIPTOR_NAMES,
    DESCRIPTORS,
    Descriptor,
    check_descriptor_values,
    descriptor_table,
    imputed_mask,
)
from dopantgap.elements.flags import TOXIC_ELEMENTS, element_flags
from dopantgap.elements.host_relative import (
    HOST_RELATIVE_DESCRIPTORS,
    HOST_RELATIVE_NAMES,
    host_relative_table,
    named_atoms,
    reference_atoms,
)

# hosts.formulas imports nothing from elements, so this re-export makes no import cycle.
from dopantgap.hosts.formulas import host_compositions, parse_formula, read_host_file

__all__ = [
    "DESCRIPTORS",
    "DESCRIPTOR_NAMES",
    "HOST_RELATIVE_DESCRIPTORS",
    "HOST_RELATIVE_NAMES",
    "TOXIC_ELEMENTS",
    "Descriptor",
    "check_descriptor_values",
    "descriptor_table",
    "element_flags",
    "host_compositions",
    "host_relative_table",
    "imputed_mask",
    "parse_formula",
    "read_host_file",
    "named_atoms",
    "reference_atoms",
]
