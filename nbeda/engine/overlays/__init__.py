"""Per-section overlays: engine numbers replacing sample numbers (one module per tab)."""
