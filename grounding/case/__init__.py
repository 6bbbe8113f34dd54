"""Case stage: the immutable case model, the YAML document and its checks, one reader per section."""
