"""Pure statistical functions: coordinates and shapely polygons in, typed result records out.

Nothing here reads files, prints, or draws. Every function names its published source.
"""
