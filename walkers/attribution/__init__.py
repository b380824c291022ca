"""Backward tracking and source attribution: where could the water of a sample have come from?

``reverse`` turns a flow around in time, ``influence`` runs particles backward from a detection
through the ordinary engine, ``inference`` weighs candidate sources against all detections, and
``output``/``figures`` write and draw the result.
"""
