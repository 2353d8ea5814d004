"""The audit of an earlier sorting: imported units matched against fresh units, the same quality
numbers at the imported times, the audit table and the self-contained HTML report with its figures.
The top floor of the core: it may import every other room.
"""
