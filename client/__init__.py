"""taprig workstation client: discover rigs, pull point sets, export."""
