"""The notebook layer: the ``%%cutoff`` cell magic, live boards, reactive tracking and views.

Nothing heavy is imported here: ``%load_ext seamline`` imports only ``notebook.magic``, and the
widget and chart modules (ipywidgets, Altair, vl-convert) load on first use.
"""
