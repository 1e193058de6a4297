"""Hot loops of lagspace (numba, ``cache=True, nogil=True``).

Each module holds the compiled kernels of one family and, beside each, a plain
numpy ``*_reference`` used only by tests to check exact agreement.
"""
