"""Bundled limit lines, one TOML file each (installed as package data of emispec)."""
