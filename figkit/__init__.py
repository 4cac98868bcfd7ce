"""figkit: journal-ready small-multiple figures from a figure sheet.

The data's way through the package, one module per stage:
sheet -> spec -> data -> stats -> layout -> draw -> checks -> provenance -> compare.
"""
__version__ = "0.1.0"
