"""The engine: a design compiled to nodal form, DC operating points, AC, noise, distortion.

Physics only, batched over value sets and conditions. Imports contracts and quantities.
"""
