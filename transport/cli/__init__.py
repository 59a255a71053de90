"""The command line (``stratiflux``): ``main`` registers one module per command;
``common`` holds what they share. Commands only parse, call the API and print.
"""
