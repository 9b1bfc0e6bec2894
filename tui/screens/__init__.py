"""The workbench's screens: setup, the main workbench, read-only inspection, and the modals."""
