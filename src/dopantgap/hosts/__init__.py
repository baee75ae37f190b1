"""What dopantgap knows of host crystals beyond their labels.

* :mod:`~dopantgap.hosts.site_properties`: per host and site, the number of sites per
  formula unit and the coordination a vacancy sees, read from the host file.
"""

from dopantgap.hosts.site_properties import SiteProperties, read_site_properties

__all__ = ["SiteProperties", "read_site_properties"]
