"""Soil soundings: readings files, the layered-earth forward model and the fitted soil models.

This stage comes before the case: a case file may name a readings file, fitted at load time.
"""
