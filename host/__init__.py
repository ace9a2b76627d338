"""host: everything that touches the world (configs, link, loops, logs, CLI).

Talks to rtmodel only through rtmodel.api (pack arrays, step a frame, read outputs).
"""
