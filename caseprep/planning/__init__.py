"""Config → fully resolved cases: air physics, sweep points, domain and mesh sizing, the planner.
"""
