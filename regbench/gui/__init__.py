"""Qt views over a headless Session. The only package that imports Qt."""
