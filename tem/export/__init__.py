"""Export stage: CSV layer tables, LAS 2.0 pseudo-wells, SEG-Y depth and two-way-time sections."""
