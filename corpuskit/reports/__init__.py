"""Reports written by the export stage: balance, datasheet, tables."""
