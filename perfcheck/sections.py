"""Every optional section of the site file validated at once, when a command loads it, so a
typo in ``[detect]`` fails the first command rather than the fourth.

Each stage owns the rules of its section (``[metrics]``, ``[detect]``, ``[report]``,
``[guarantees]``, ``[meter]``, ``[[corrections]]``); this module only calls them. A section
the site file leaves out takes the stage's defaults and cannot be wrong, so its stage is not
loaded for it: a command loads only the stages it runs and those whose section is written.
"""

from __future__ import annotations

from perfcheck.lazy import lazy_module
from perfcheck.site import Site

detect = lazy_module("perfcheck.detect")
guarantees = lazy_module("perfcheck.guarantees")
meter = lazy_module("perfcheck.meter")
metrics = lazy_module("perfcheck.metrics")
report = lazy_module("perfcheck.report")
units = lazy_module("perfcheck.units")

# each optional section: the stage that owns it and the name of the stage's function that
# validates it
RULES = {
    "metrics": (metrics, "load_settings"),
    "meter": (meter, "load_settings"),
    "detect": (detect, "load_settings"),
    "report": (report, "report_settings"),
    "guarantees": (guarantees, "settings"),
    "corrections": (units, "load_corrections"),
}


def validate(site: Site) -> Site:
    """Raise SiteFileError (naming the key) for the first bad key of any section written."""
    for section, (stage, rule) in RULES.items():
        if section in site.raw:
            getattr(stage, rule)(site)
    return site
