"""The browser workbench (Streamlit): one module per page, ``common`` for what they share, ``main.run`` to start.

Each page module defines ``render()`` and runs it when Streamlit executes the file as a page; importing a page
module has no effect. ``app.py`` at the repository root calls :func:`catalog.app.main.run`.
"""
