"""Report figures (matplotlib, no screen): one column run (``column``), a comparison of
alternatives (``compare``) and a site map (``site_map``), sharing one look (``style``:
colour-blind-safe palette, reserved screening-level colour, caution footer).
"""
