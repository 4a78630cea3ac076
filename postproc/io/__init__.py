"""Reading results from disk: surface and flow (volume) readers, the newest VTK export of a case.
"""
