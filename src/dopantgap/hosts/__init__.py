"""What dopantgap knows of host crystals beyond their labels.

* :mod:`~dopantgap.hosts.formulas`: host labels as compositions (chemical formulas, and
  host files that map other labels to formulas);
* :mod:`~dopantgap.hosts.properties`: the host file's optional host properties
  (numbers with units, and categories), one value per host;
* :mod:`~dopantgap.hosts.site_properties`: per host and site, the number of sites per
  formula unit and the coordination a vacancy sees, read from the host file;
* :mod:`~dopantgap.hosts.descriptors`: host descriptors (composition-weighted mean, min
  and max of elemental descriptors, plus the host properties), each with unit and
  definition.

``formulas`` imports nothing from :mod:`dopantgap.elements` (which re-exports it), so
the two packages import each other's modules without a cycle.
"""

from dopantgap.hosts.formulas import host_compositions, parse_formula, read_host_file
from dopantgap.hosts.properties import HOST_FILE_RESERVED_COLUMNS, HostProperties, read_host_properties
from dopantgap.hosts.site_properties import SiteProperties, read_site_properties
from dopantgap.hosts.descriptors import (
    HOST_ELEMENT_DESCRIPTORS,
    host_descriptor_table,
    host_descriptors,
    host_property_columns,
)

__all__ = [
    "HOST_ELEMENT_DESCRIPTORS",
    "HOST_FILE_RESERVED_COLUMNS",
    "HostProperties",
    "SiteProperties",
    "host_compositions",
    "host_descriptor_table",
    "host_descriptors",
    "host_property_columns",
    "parse_formula",
    "read_host_file",
    "read_host_properties",
    "read_site_properties",
]
