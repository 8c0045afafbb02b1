"""Reports of checks and batches: plots (matplotlib, imported only in ``plots``) and HTML pages.

``data`` gathers the arrays a check's plots draw, ``plots`` draws them, ``pages`` writes the HTML,
``writer`` puts a batch's pages in a folder. Importing this package imports no matplotlib.
"""
