"""The look every figure shares, in one place, so a journal can take any of them unedited.

``style`` holds the column widths, type sizes and matplotlib settings (white background,
300 dpi, isotope labels with true super- and subscripts); ``axes`` the age axis (older to
the left in every figure) and the stage strip under it; ``save`` the one function that
writes a figure as PNG, SVG and PDF with its caption line. matplotlib is imported inside
the functions (the Agg canvas, no pyplot state), so importing this package costs nothing.
"""
