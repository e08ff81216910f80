"""Stage 3b, forms: producers and recognisers of the canonical forms, one module per form family."""
