"""The leakfleet dashboard: a Streamlit app over any QueryStore.

Layers: ``settings`` (pure: environment and config file → frozen settings), ``display`` (pure:
units and formatting), ``data`` (the only module that talks to the store: the client in
``st.cache_resource``, parameterised queries in ``st.cache_data``), ``charts`` (every altair
chart), ``common`` (shared widgets: sidebar, time range, guard against a missing store) and
``views/`` (one module per page: widgets and layout only). Statistics come from ``analytics``.
Nothing here connects to anything at import time; nothing imports ``dashboard``.
"""
