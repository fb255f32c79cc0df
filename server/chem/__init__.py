"""Chemistry with RDKit: identity, side chains, scaffolds, drawings, geometry."""
