"""Quality numbers of units: refractory violations and contamination, isolation distance and
L-ratio, SNR, missed spikes, presence, drift, correlograms, the per-unit table and its CSV, and
spike-train matching. May import ``units`` and everything below it.
"""
