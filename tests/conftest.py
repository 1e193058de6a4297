import os
import sys

# Let tests import the shared reference systems as `systems`.
sys.path.insert(0, os.path.dirname(__file__))
