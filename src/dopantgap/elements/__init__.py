"""Chemical elements: descriptors, safety flags, host formulas and host-relative terms.

One module per concept, data flowing one way:

* :mod:`~dopantgap.elements.descriptors`: every number known about each element, read
  from mendeleev's bundled data, with unit, source and imputation rule;
* :mod:`~dopantgap.elements.flags`: radioactive and toxic elements, for cautions;
* :mod:`~dopantgap.elements.formulas`: host labels as compositions (formulas, host files);
* :mod:`~dopantgap.elements.host_relative`: the host atoms an impurity at a site is
  compared with, and the impurity-minus-reference terms.

The public names of all four are importable from ``dopantgap.elements`` itself.
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
from dopantgap.elements.formulas import host_compositions, parse_formula, read_host_file
from dopantgap.elements.host_relative import (
    HOST_RELATIVE_DESCRIPTORS,
    HOST_RELATIVE_NAMES,
    host_relative_table,
    reference_atoms,
)

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
    "reference_atoms",
]
