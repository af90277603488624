"""Every optional section of the site file validated at once, when a command loads it, so a
typo in ``[detect]`` fails the first command rather than the fourth.

Each stage owns the rules of its section (``[metrics]``, ``[detect]``, ``[report]``,
``[guarantees]``, ``[meter]``, ``[[corrections]]``); this module only calls them all.
"""

from __future__ import annotations

from perfcheck import detect, guarantees, meter, metrics, report, units
from perfcheck.site import Site


def validate(site: Site) -> Site:
    """Raise SiteFileError (naming the key) for the first bad key of any section."""
    metrics.load_settings(site)
    meter.load_settings(site)
    detect.load_settings(site)
    report.report_settings(site)
    guarantees.settings(site)
    units.load_corrections(site)
    return site
