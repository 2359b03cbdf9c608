"""World files: the typed schema, YAML loading and clear one-line errors."""

from .loader import WorldFileError, file_hash, load_world, parse_world, read_yaml_mapping
from .schema import World

__all__ = ["World", "WorldFileError", "file_hash", "load_world", "parse_world", "read_yaml_mapping"]
