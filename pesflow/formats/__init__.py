"""File formats in one place: atomic writes, extended XYZ export."""
