"""rtmodel: the plant. Pure numeric kernels over flat float64 arrays.

Owns: the DC machine in every connection, magnetization, converter and mains, mechanics and
thermal model. Must never import host, serial, file or clock modules: no I/O here.
"""
