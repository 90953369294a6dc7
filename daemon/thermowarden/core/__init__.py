"""The pure core: index computation, rule language, advisory lifecycle, decoding.

Nothing in here reads the clock, the environment, files or the network.
"""
