//! beamproof-api: the small, stable contract between the beamproof runner and its analysis
//! plugins. It holds the dose data types, the result types, the [`Analysis`] trait and the C ABI
//! through which dynamic plugins are loaded. It depends on serde alone, so plugins build fast.

pub mod abi;
mod contract;
mod data;
pub mod film;
pub mod mu;
mod outcome;

pub use contract::{
    Analysis, AnalysisError, AnalysisInput, BeamInfo, CriteriaNeed, CriteriaSet, GammaCriterion,
    Levels, MetricSpec, Normalisation, ParamSpec, ParamType, PluginManifest, TestInfo, TestKind,
};
pub use data::{
    Curve, CurveAxis, Dataset, DatasetData, DoseUnit, Grid, PointSet, SINGLETON_AXIS_TOLERANCE_MM,
    parse_xyz,
};
pub use outcome::{
    AnalysisOutput, Band, Figure, LIMIT_SLACK, Limits, Metric, Reference, Series, SeriesStyle,
    Span, Status, Table, decimals_for, fixed, fixed_for,
};
