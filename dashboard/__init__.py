"""lagspace dashboard: a Panel app over one per-session state object; it holds no science."""
