"""Design files: TOML in, validated frozen dataclasses of SI floats out."""

from chipflow.spec.reader import REQUIRED, Table, parse_design_text, read_design_file

__all__ = ["REQUIRED", "Table", "parse_design_text", "read_design_file"]
