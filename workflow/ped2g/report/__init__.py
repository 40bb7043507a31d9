"""The report stage: one HTML report with figures, tables, methods, provenance and cautions."""
