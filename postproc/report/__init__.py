"""Presentation: renders the sweep's analysis data as a self-contained HTML report (no computing).
"""
