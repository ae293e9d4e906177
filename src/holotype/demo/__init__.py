"""The bundled demo: an invented freshwater lake survey and a guided tour of holotype on it."""
