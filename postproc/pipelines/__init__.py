"""Orchestration: one case (forces, flow) and one sweep, from readers through kernels to data.
"""
