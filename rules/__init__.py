"""Default rule packs (YAML data files, validated by thermowarden.config models)."""
