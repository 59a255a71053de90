import os
import sys

# make the test helper module ``reference`` importable
sys.path.insert(0, os.path.dirname(__file__))
