"""dashboard: a read-only Dash app over the serving snapshot."""
