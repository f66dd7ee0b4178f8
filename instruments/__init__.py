"""Bench instruments over VISA: transport, SCPI helpers, one driver module per role.

Kept import-free on purpose: importing this package loads neither pyvisa nor any driver.
"""
