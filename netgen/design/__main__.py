"""``python -m netgen.design``: print the design-key reference (docs/design_reference.md)."""

from .keys import reference_markdown

print(reference_markdown())
