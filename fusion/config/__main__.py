"""``python -m fusion.config``: print the key reference (the generated part of configs/README.md)."""

from ._reference import markdown_reference

print(markdown_reference())
