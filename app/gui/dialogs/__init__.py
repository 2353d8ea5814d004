"""Dialogs of the workbench window."""
