"""The browser explorer: a local page where the spectrum follows the controls (``powderspin explore``).

:mod:`~powderspin.explorer.state` holds one page's model, data, values, fit and
files without knowing about the browser; :mod:`~powderspin.explorer.page`
builds the Bokeh document of one browser tab; :mod:`~powderspin.explorer.server`
serves it on 127.0.0.1 with Bokeh's server (its JavaScript is served from the
installed package: nothing is fetched from the internet).
"""
