"""fusion: thermoelastic stress analysis fused with digital image correlation.

Subpackages
-----------
fusion.mechanics
    Materials, classical lamination theory, thermoelastic laws, heat model.
fusion.thermal
    Lock-in of infrared frame stacks, motion compensation.
fusion.dic
    Subset correlation, strain, cyclic strain ranges.
fusion.register
    Correlation grid onto the infrared grid.
fusion.io
    Readers and writers.
fusion.report
    Figures, HTML report, summary JSON.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
