"""`python -m pipeline.config` prints the config reference the README embeds."""
from . import schema_reference

print(schema_reference())
