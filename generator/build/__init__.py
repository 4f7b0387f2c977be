"""The pipeline: ``specfold check`` and ``specfold build``, with the build cache at two points.

:func:`.site.build` reads in one screen: load, analyse and check (:func:`.pipeline.check`), lay out
and write the site.  The cache (:mod:`.store`) sits at two points, both visible there: the channel
store around the check (an unchanged channel file is neither parsed, analysed nor checked again;
``specfold check`` uses the same store) and the page store around writing (a page whose view is
unchanged is carried from the current site).  :mod:`.pages` lays out and renders the site,
:mod:`.output` owns the output folder (what may be replaced, the lock, the atomic swap).
"""
