"""Reading and writing our files: case files (TOML) and observation logs (JSON lines)."""
