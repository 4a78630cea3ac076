"""TOML config → frozen, validated ``Config``.
"""
