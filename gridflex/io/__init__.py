"""Everything that touches disk: grid readers, atomic writers, file formats."""
