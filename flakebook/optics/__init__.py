"""Thin-film optics: materials, transfer-matrix stacks, microscope channels, contrast, absorptance
and layer likelihoods. Pure numpy/scipy.

Public API (names kept stable for the other packages):

- ``materials``: ``get_material(name) -> Material`` (``.nk(wavelength_nm, layers=None)``,
  ``.nk_extraordinary``, ``.layer_spacing_nm``, ``.reference``, ``.variants()``),
  ``list_materials()``, ``material_from_csv(path)``, ``constant_material(name, nk)``.
- ``substrate``: ``parse_substrate(spec) -> Substrate``, ``Substrate.from_oxide(oxide_nm)``,
  ``substrate_from_options(spec, oxide_nm)``, ``Hole(bottom="si"|"au"|"open", depth_nm=None)``.
- ``stack``: ``transfer_matrix(...) -> StackResult`` (R, T, A per film; s, p; uniaxial films),
  ``stack_reflectance``, ``cone_nodes``.
- ``microscope``: ``Illumination``, ``Channels``, ``Microscope(na_illumination, illumination,
  channels)``, ``channel_contrast(material, layers, substrate, microscope, geometry, hole) ->
  ContrastTable``, ``cone_reflectance``.
- ``layers``: ``layer_likelihood(contrast, contrast_err, *, material, substrate, microscope, ...,
  oxide_grid=None, calibration=None) -> LayerLikelihood`` (``.grid``: a GridLikelihood on a
  shared oxide grid), ``layer_likelihoods(contrasts, contrast_errs, ...)`` (many rows at once),
  ``contrast_err_from_pixels``, ``model_contrast_curve``.
- ``nkmodel``: ``nk_uncertainty(material) -> NkUncertainty`` (the n,k uncertainty around the
  layer-resolved centre: ``perturbed``, ``narrowed``, ``description``).
- ``calibration``: ``KnownFlake``, ``calibrate_layers(flakes, *, material, substrate,
  microscope, oxide_err_nm, ...) -> LayerCalibration`` (``to_dict``/``from_dict``,
  ``nk_model``).
- ``camera``: ``saturation_mask``, ``CalibrationObservation``, ``calibrate(...) ->
  CameraCalibration`` (``to_dict``/``from_dict``, ``contrast``, ``likelihood_options``).
- ``absorptance``: ``absorptance(...) -> Absorptance``, ``absorptance_spread(...)``,
  ``si_raman_attenuation``, ``si_raman_likelihood``.
- ``spectrum``: ``read_reflectance_contrast``, ``reflectance_contrast_likelihood``.

Optical contrast everywhere: C = 1 - (integral R_flake I S)/(integral R_reference I S), the
reference being the bare supported substrate; positive when the flake is darker.
"""
