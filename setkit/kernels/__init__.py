"""Pure array algorithms shared by families (no set objects here)."""
