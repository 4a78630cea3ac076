"""STL geometry: reading and writing, surface checks, hull and frontal area.
"""
