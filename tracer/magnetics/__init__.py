"""Static magnetic fields in axial symmetry and uniform fields in regions.

Modules, one idea each: ``loop`` (a circular current loop in closed form), ``coil`` (a coil of
rectangular winding cross-section by quadrature over loops), ``profile`` (a field given on the axis
and continued off it by its series), ``uniform`` (a uniform field, optionally
confined to a box or a hard-edged sector), ``units`` (one unit field per coil on the map's grid,
combined by current), ``ends`` (whether a round source has faded at the domain's ends).  Iron is not solved: a lens with pole pieces enters as an axial profile.
"""
