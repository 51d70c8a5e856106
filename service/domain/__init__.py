"""The pure computing core of berth: numpy and the standard library only.

Every function takes numpy arrays (one element per scenario) or scalars that broadcast,
so one quote and a million-row sweep run through the same code.
"""
