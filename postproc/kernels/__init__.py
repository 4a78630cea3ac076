"""Pure numeric kernels (numpy/scipy only)."""
