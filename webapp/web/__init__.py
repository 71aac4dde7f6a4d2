"""The web layer: the app factory, access control, the upload, export, report and manage routes, the server.

Built on :mod:`webapp.ui` (layout and callbacks) and :mod:`webapp.store`
(datasets and cached results); nothing below this layer imports it.
"""
