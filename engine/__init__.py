"""lagspace engine: stateless delay-coordinate embedding and diagnostics.

Every public function takes data and settings and returns new data (mostly
``xarray.Dataset``); nothing here keeps state between calls or imports a UI
library.
"""

__version__ = "0.1.0"
