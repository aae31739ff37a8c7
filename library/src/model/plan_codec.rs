//! The plan codecs that carry Waypath's two aggregates
//! (`waypath_cross_products`, `waypath_newton_sums`, see
//! [`super::disk_sums`]) to an Apache Ballista scheduler and its executors
//! (cargo feature `across_machines`).
//!
//! Why codecs and not a function registry: each aggregate has settings of
//! its own for every pass — the design row's layout, the outcome's centre,
//! the Newton step's coefficients — which a function looked up by name
//! could not know. Encoding writes them beside the function's name in the
//! plan (as JSON, floats as their bits), and decoding rebuilds the same
//! aggregate on the machine that runs the task. Everything else in a plan
//! (the Parquet scan, Ballista's own stages) goes through Ballista's codecs,
//! which these wrap.

use std::sync::Arc;

use ballista_core::serde::{BallistaLogicalExtensionCodec, BallistaPhysicalExtensionCodec};
use datafusion::catalog::TableProvider;
use datafusion::common::TableReference;
use datafusion::datasource::file_format::FileFormatFactory;
use datafusion::error::{DataFusionError, Result as EngineResult};
use datafusion::execution::TaskContext;
use datafusion::arrow::datatypes::SchemaRef;
use datafusion::logical_expr::{AggregateUDF, Extension, LogicalPlan};
use datafusion::physical_plan::ExecutionPlan;
use datafusion_proto::logical_plan::LogicalExtensionCodec;
use datafusion_proto::physical_plan::{PhysicalExtensionCodec, PhysicalProtoConverterExtension};

use crate::table::across_machines::PlanCodecs;

use super::disk_sums::{DesignSums, CROSS_PRODUCTS, NEWTON_SUMS};

/// The codecs a client, a scheduler and every executor must share.
pub fn plan_codecs() -> PlanCodecs {
    PlanCodecs { logical: Arc::new(LogicalCodec::default()), physical: Arc::new(PhysicalCodec::default()) }
}

/// Writes an aggregate's settings when it is one of ours (else nothing, and
/// the function travels by name as usual).
fn encode(function: &AggregateUDF, buffer: &mut Vec<u8>) {
    if let Some(ours) = function.inner().downcast_ref::<DesignSums>() {
        buffer.extend(ours.encode());
    }
}

/// Rebuilds one of our aggregates from its settings; `None` for a name
/// that is not ours.
fn decode(name: &str, bytes: &[u8]) -> Option<EngineResult<Arc<AggregateUDF>>> {
    (name == CROSS_PRODUCTS || name == NEWTON_SUMS)
        .then(|| DesignSums::decode(name, bytes).map(Arc::new).map_err(|e| DataFusionError::Plan(format!("waypath: {e}"))))
}

/// Ballista's logical codec, with our aggregates.
#[derive(Debug, Default)]
pub struct LogicalCodec {
    inner: BallistaLogicalExtensionCodec,
}

impl LogicalExtensionCodec for LogicalCodec {
    fn try_decode(&self, buf: &[u8], inputs: &[LogicalPlan], ctx: &TaskContext) -> EngineResult<Extension> {
        self.inner.try_decode(buf, inputs, ctx)
    }

    fn try_encode(&self, node: &Extension, buf: &mut Vec<u8>) -> EngineResult<()> {
        self.inner.try_encode(node, buf)
    }

    fn try_decode_table_provider(
        &self,
        buf: &[u8],
        table_ref: &TableReference,
        schema: SchemaRef,
        ctx: &TaskContext,
    ) -> EngineResult<Arc<dyn TableProvider>> {
        self.inner.try_decode_table_provider(buf, table_ref, schema, ctx)
    }

    fn try_encode_table_provider(&self, table_ref: &TableReference, node: Arc<dyn TableProvider>, buf: &mut Vec<u8>) -> EngineResult<()> {
        self.inner.try_encode_table_provider(table_ref, node, buf)
    }

    fn try_decode_file_format(&self, buf: &[u8], ctx: &TaskContext) -> EngineResult<Arc<dyn FileFormatFactory>> {
        self.inner.try_decode_file_format(buf, ctx)
    }

    fn try_encode_file_format(&self, buf: &mut Vec<u8>, node: Arc<dyn FileFormatFactory>) -> EngineResult<()> {
        self.inner.try_encode_file_format(buf, node)
    }

    fn try_decode_udaf(&self, name: &str, buf: &[u8]) -> EngineResult<Arc<AggregateUDF>> {
        decode(name, buf).unwrap_or_else(|| self.inner.try_decode_udaf(name, buf))
    }

    fn try_encode_udaf(&self, node: &AggregateUDF, buf: &mut Vec<u8>) -> EngineResult<()> {
        encode(node, buf);
        Ok(())
    }
}

/// Ballista's physical codec, with our aggregates.
#[derive(Debug, Default)]
pub struct PhysicalCodec {
    inner: BallistaPhysicalExtensionCodec,
}

impl PhysicalExtensionCodec for PhysicalCodec {
    fn try_decode(
        &self,
        buf: &[u8],
        inputs: &[Arc<dyn ExecutionPlan>],
        ctx: &TaskContext,
        converter: &dyn PhysicalProtoConverterExtension,
    ) -> EngineResult<Arc<dyn ExecutionPlan>> {
        self.inner.try_decode(buf, inputs, ctx, converter)
    }

    fn try_encode(&self, node: Arc<dyn ExecutionPlan>, buf: &mut Vec<u8>, converter: &dyn PhysicalProtoConverterExtension) -> EngineResult<()> {
        self.inner.try_encode(node, buf, converter)
    }

    fn try_decode_udaf(&self, name: &str, buf: &[u8]) -> EngineResult<Arc<AggregateUDF>> {
        decode(name, buf).unwrap_or_else(|| self.inner.try_decode_udaf(name, buf))
    }

    fn try_encode_udaf(&self, node: &AggregateUDF, buf: &mut Vec<u8>) -> EngineResult<()> {
        encode(node, buf);
        Ok(())
    }
}
