"""voxtopo in napari: find components, loops, cavities and pores in the layer you look at.

The npe2 manifest (``napari.yaml``) declares the analysis panel, the diagram panel, a
reader for voxtopo result folders and the sample volumes. The panels are thin: the work is
done by the voxtopo library (:mod:`voxtopo.jobs.analyse`, :func:`voxtopo.persistence`).
"""

__version__ = "0.1.0"
