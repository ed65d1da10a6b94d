"""Pure analytics: typed data in, typed results out, no I/O."""
