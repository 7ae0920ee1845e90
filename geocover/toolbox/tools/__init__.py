"""Built-in tools, one module per kind of tool (the model tools share one module)."""
