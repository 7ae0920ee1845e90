"""The processing toolbox: parameter types, tools, the pipeline, study files and the registry."""
