"""Dockable panels of the workbench window, one module per panel."""
