"""Pure numeric kernels (numpy/scipy in, numbers and frozen dataclasses out; no I/O).
"""
