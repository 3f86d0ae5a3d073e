"""The small shared core that several stages need: registries, file and text helpers.

Nothing here imports a stage; every stage may import from here.
"""
