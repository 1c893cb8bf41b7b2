"""Adds the coupled inductance of probe leads and circuit copper to a SPICE netlist.

Pipeline, one module per stage, data flowing one way:
netlist -> sidefile -> conductors -> inductance -> synthesis -> simulate -> compare -> report.
"""

__version__ = "0.1.0"
