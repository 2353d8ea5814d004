"""Export of curated units: unit times as CSV and NumPy, the binned spike matrix, and the folder
manifest that keeps an export folder consistent as a whole. May import ``quality`` and below.
"""
