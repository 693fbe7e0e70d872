"""Pictures of results, a room of their own outside the numerical core.

``drawing``: diagrams, barcodes, persistence images and distance matrices drawn with
matplotlib's object API (SVG with one group per point or bar, or PNG). ``plot_jobs``: a plot
job's stored rows or grid handed to ``drawing``. matplotlib is imported on the first plot, in
a worker's compute child only; the API process and ``workers.core`` never import it.
"""
