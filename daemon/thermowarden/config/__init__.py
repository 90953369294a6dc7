"""Configuration models, all in one place: this package holds every model of the site file,
its spaces and points, the service's settings, delivery, and the rule packs (the rule
language itself, which compiles them, is :mod:`thermowarden.rules`).

Load a site with :func:`load_site`. Every problem comes back as a :class:`ConfigIssue`
with the file, line and column, the offending value and what was expected; a misspelt key
gets the closest valid one suggested. Environment variables override any setting:
``THERMOWARDEN_BROKER__URL=mqtt://10.0.0.5:1883`` (``__`` separates levels). Secrets (the
broker password) come from the environment or a file, never from the site file itself.

The modules, along the path of the data (each imports only those above it):

- :mod:`~thermowarden.config.positions`: YAML parsed with the file, line and column of
  every key and value;
- :mod:`~thermowarden.config.base`: :class:`Strict`, the base of every model;
- :mod:`~thermowarden.config.points`: what a topic carries (quantity, unit, payload
  format, calibration, plausible bounds), explicit points and topic templates;
- :mod:`~thermowarden.config.broker`: the MQTT side (broker, output prefix, outbox,
  commands);
- :mod:`~thermowarden.config.service`: message limits, evaluation, retention, web page;
- :mod:`~thermowarden.config.delivery`: webhooks and e-mail per audience;
- :mod:`~thermowarden.config.group`: a group of instances (lease store, TTL, standbys,
  shard buckets);
- :mod:`~thermowarden.config.site`: the site, its spaces and defaults, the whole file
  (:class:`SiteConfig`);
- :mod:`~thermowarden.config.rule_packs`: rule pack models;
- :mod:`~thermowarden.config.errors`: :class:`ConfigIssue`, :class:`ConfigError`, and
  validation errors mapped onto positions;
- :mod:`~thermowarden.config.loading`: files and environment to validated models
  (:func:`load_site`, :func:`load_rule_pack_file`, :func:`read_password`).

Import from the package (``from thermowarden.config import SiteConfig``) or from the module
that defines a name; both stay valid.
"""

from __future__ import annotations

from thermowarden.config.base import Strict
from thermowarden.config.broker import (
    BrokerConfig,
    CommandsConfig,
    OutboxConfig,
    OutputConfig,
    TlsConfig,
)
from thermowarden.config.delivery import (
    AudienceDelivery,
    DeliveredEvent,
    DeliveryConfig,
    EmailConfig,
    RetryConfig,
    SmtpConfig,
    WebhookConfig,
)
from thermowarden.config.errors import ConfigError, ConfigIssue, issues_from_validation
from thermowarden.config.group import GroupConfig, NatsStoreConfig, PostgresStoreConfig
from thermowarden.config.loading import (
    CSV_COLUMNS,
    ENV_PREFIX,
    load_rule_pack_file,
    load_site,
    read_password,
    read_yaml_file,
)
from thermowarden.config.points import (
    SIDED_QUANTITIES,
    Height,
    JsonFormat,
    NumberFormat,
    PayloadFormat,
    PointBase,
    PointConfig,
    Quantity,
    SenmlFormat,
    Side,
    StateFormat,
    TemplateConfig,
)
from thermowarden.config.positions import Position, SourceMap
from thermowarden.config.rule_packs import (
    AUDIENCES,
    PRIORITIES,
    RULE_ID,
    AppliesTo,
    Audience,
    Priority,
    RuleConfig,
    RuleEffect,
    RuleLevel,
    RuleMessages,
    RuleNumber,
    RulePackConfig,
)
from thermowarden.config.service import (
    EvaluationConfig,
    IngestConfig,
    RetentionConfig,
    WebConfig,
)
from thermowarden.config.site import (
    MRT_ASSUMPTION,
    OUTDOOR_QUANTITIES,
    SLUG,
    WEEKDAYS,
    Assumptions,
    BuildingConfig,
    ClothingEnsemble,
    ExternalIds,
    FloorConfig,
    OccupancyConfig,
    ParameterValue,
    PeopleConfig,
    PointTrust,
    SiteConfig,
    SiteInfo,
    SpaceConfig,
    SpaceDefaults,
    WorkClass,
)
from thermowarden.config.windows import OverhangConfig, WindowConfig

# The names these two helpers had while config was one module.
_issues_from_validation = issues_from_validation
_read_yaml_file = read_yaml_file

__all__ = [
    "AUDIENCES", "CSV_COLUMNS", "ENV_PREFIX", "MRT_ASSUMPTION", "OUTDOOR_QUANTITIES",
    "PRIORITIES", "RULE_ID", "SIDED_QUANTITIES", "SLUG", "WEEKDAYS",
    "AppliesTo", "Assumptions", "Audience", "AudienceDelivery", "BrokerConfig",
    "BuildingConfig", "FloorConfig", "PointTrust",
    "ClothingEnsemble", "CommandsConfig", "ConfigError", "ConfigIssue", "DeliveredEvent",
    "DeliveryConfig", "EmailConfig", "EvaluationConfig", "ExternalIds", "GroupConfig",
    "Height", "NatsStoreConfig", "PostgresStoreConfig",
    "IngestConfig", "JsonFormat", "NumberFormat", "OccupancyConfig", "OutboxConfig",
    "OutputConfig", "ParameterValue", "PayloadFormat", "PeopleConfig", "PointBase",
    "PointConfig", "Position", "Priority", "Quantity", "RetentionConfig", "RetryConfig",
    "RuleConfig", "RuleEffect", "RuleLevel", "RuleMessages", "RuleNumber", "RulePackConfig",
    "SenmlFormat", "Side", "SiteConfig", "SiteInfo", "SmtpConfig", "SourceMap",
    "SpaceConfig", "SpaceDefaults", "StateFormat", "Strict", "TemplateConfig", "TlsConfig",
    "OverhangConfig", "WindowConfig",
    "WebConfig", "WebhookConfig", "WorkClass",
    "issues_from_validation", "load_rule_pack_file", "load_site", "read_password",
    "read_yaml_file",
]
