"""Study stage: the pipeline and result of a study, scenarios, discretisation-error estimates, --converge,
metal-drop screening and soil uncertainty."""
