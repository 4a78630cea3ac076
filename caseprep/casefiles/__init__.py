"""Cases → files: the solver's dictionary syntax, rendering of the templates, writing sweep folders.
"""
