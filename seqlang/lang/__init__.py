"""Front end: source text to syntax tree, with units and diagnostics."""
