"""What is kept on disk: datasets and saved views (:mod:`~webapp.store.storage`), the shared
result cache (:mod:`~webapp.store.compute`), the locks between workers and the owner-only
data directory; :mod:`~webapp.store.services` puts them together for one data directory.
"""
