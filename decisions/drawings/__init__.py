"""The decision tree and the charts, drawn once as reportlab.graphics drawings.

Every function here returns a ``reportlab.graphics.shapes.Drawing``; the memo
places them in the PDF (``render.to_pdf_flowable``) and the web pages inline the
very same drawings as SVG (``render.to_svg``). Pure drawing code: it may use the
valuation core, never Django.
"""

from reportlab import rl_config

# reportlab checks every attribute set on a shape against its type map. Its own
# settings call this a development aid that slows shapes down (rl_settings.py,
# ``shapeChecking``); the drawings here are built by this package alone and checked
# by its tests (tests/test_drawings.py), so it is off, for the whole process. Set
# before this package imports reportlab.graphics.shapes: that module then defines no
# checking ``__setattr__`` at all (imported earlier, it keeps one that finds the
# setting off on each call).
rl_config.shapeChecking = 0
