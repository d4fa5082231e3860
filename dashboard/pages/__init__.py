"""Dashboard pages: one module per URL (``dash.register_page``), imported by the app, never by hand."""
