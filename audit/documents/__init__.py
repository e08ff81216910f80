"""Stage 1, documents: model documents, hardened loading, sparse triplets, published schemas, python-control/scipy objects."""
