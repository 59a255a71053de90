"""Report figures (matplotlib, no screen): one column run (``column``) and a
comparison of alternatives (``compare``). Every figure carries the caution.
"""
