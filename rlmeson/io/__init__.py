"""Edges: configs, the result store, exports, readers, figures."""
