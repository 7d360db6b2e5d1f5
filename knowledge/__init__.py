"""The knowledge packs shipped with diagnose (data only; see DEVELOPERS.md)."""
