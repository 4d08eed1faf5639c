"""cloakrcs engine: calibrated RCS and cloak metrics from chamber sweeps.

Import the pieces you need, for example::

    from analysis.campaign import load_campaign
    from analysis.touchstone import read_touchstone
"""

__version__ = "0.1.0"
