"""Reading a solved run: receptor metrics on the continuous solution (``metrics``),
the plain-sentence summary (``summary``) and alternatives side by side (``compare``).
"""
