"""Stage 6, products: what people read from a run folder (its reader, the printed summary,
summary.ecsv, the HTML report, figures, exports and FITS templates, and the text the command
line prints).
"""
