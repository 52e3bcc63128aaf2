"""One module per dashboard page (widgets and layout only); app.py lists them."""
