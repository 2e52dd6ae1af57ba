"""The stage contract: what the extractor writes and the emulator reads, spelled once.

Both stages import from here; this package imports nothing else of ours. One concept per module:
series-file schema, table columns, flags, errors, atomic writing, names, constraint declarations.
"""
