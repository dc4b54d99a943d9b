"""Readers and writers: raw recordings (by format), products, exports."""
