"""The invented demo scenario (a synthetic recording with known units) and scoring detections against
its ground truth. May import ``quality`` and everything below it; the audit and exports do not use it.
"""
