"""The campaign config: TOML read with the standard library, validated into typed objects.

A config describes a test campaign: the materials and laminates, and one
``[[run]]`` table per paired infrared/correlation run. :func:`load_config`
returns a :class:`Config`; every mistake raises :class:`~fusion.errors.ConfigError`
naming the dotted key (``laminate.ply_thickness``, ``run 'CX-2Hz'.thermal.frames``)
and what was expected. Quantities may carry units ("135 GPa", "0.25 mm",
"5 Hz"); a bare number means the SI unit documented for its key (angles in
degrees). The key reference in ``configs/README.md`` is generated from this
module (``python -m fusion.config``).
"""

from ._load import Config, load_config, loads_config
from ._reference import markdown_reference
from ._sections import RUN_NAME_PATTERN, RunSpec

__all__ = ["Config", "RunSpec", "load_config", "loads_config", "markdown_reference",
           "RUN_NAME_PATTERN"]
