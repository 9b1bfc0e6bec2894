"""The workbench's widgets, one noun-named widget per module."""
