"""The sorting model (unit of every event, labels, notes), curation operations as exact deltas, the
journal and undo history, clustering and the first pass, and session files with autosave and recovery.
May import ``signal``, ``events``, ``params``, ``io`` and the shared modules.
"""
