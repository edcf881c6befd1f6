"""The decision tree and the charts, drawn once as reportlab.graphics drawings.

Every function here returns a ``reportlab.graphics.shapes.Drawing``; the memo
places them in the PDF (``render.to_pdf_flowable``) and the web pages inline the
very same drawings as SVG (``render.to_svg``). Pure drawing code: it may use the
valuation core, never Django.
"""
