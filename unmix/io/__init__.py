"""File input and output: the only code in unmix that opens paths (stacks, libraries, products)."""
