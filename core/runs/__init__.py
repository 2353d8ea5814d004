"""Whole runs that chain the stages for the command line and the batch engine: detection with its
output files, the resumable sort into a session, and batches over many recordings. May import every
room below it; no stage imports a run.
"""
