"""The dashboard's routers: HTML pages (:mod:`.pages`) and the JSON API (:mod:`.api`)."""
