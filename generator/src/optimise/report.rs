//! What the optimiser did, per emitted function and per stage.

use crate::ir::OpCount;
use std::fmt;
use std::time::Duration;

/// Operation counts of one emitted function (its outputs' live cone, shared parts
/// counted once within the function).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct FunctionOps {
    pub name: String,
    pub before: OpCount,
    pub after: OpCount,
}

/// The e-graph stage: windows, sizes and which limits were hit.
#[derive(Clone, Debug, Default)]
pub struct EgraphStats {
    pub windows: usize,
    /// Windows whose extracted result replaced the input (it was cheaper).
    pub improved: usize,
    /// Windows skipped because the time budget was spent.
    pub skipped_for_time: usize,
    /// Largest e-graph (e-nodes) and e-class count seen.
    pub max_egraph_nodes: usize,
    pub max_egraph_classes: usize,
    /// Windows stopped by each limit.
    pub hit_node_limit: usize,
    pub hit_iteration_limit: usize,
    pub hit_time_limit: usize,
    /// Windows whose graph ended above the node limit (egg checks it per batch).
    pub overshot_node_limit: usize,
    pub time: Duration,
}

#[derive(Clone, Debug)]
pub struct Report {
    pub per_function: Vec<FunctionOps>,
    /// All outputs together (shared parts counted once).
    pub total_before: OpCount,
    pub total_after: OpCount,
    pub nodes_before: usize,
    pub nodes_after: usize,
    /// After the exact stages (factoring, linear sub-sums), before the e-graph.
    pub after_factoring: OpCount,
    pub factoring_time: Duration,
    pub egraph: EgraphStats,
    pub elapsed: Duration,
}

impl Report {
    /// Whether any hard limit stopped part of the work.
    pub fn limits_hit(&self) -> bool {
        let e = &self.egraph;
        e.hit_node_limit + e.hit_iteration_limit + e.hit_time_limit + e.skipped_for_time > 0
    }
}

fn ops(c: &OpCount) -> String {
    format!(
        "{:>7} (+{} ×{} −{})",
        c.adds + c.muls + c.negs,
        c.adds,
        c.muls,
        c.negs
    )
}

impl fmt::Display for Report {
    fn fmt(&self, f: &mut fmt::Formatter) -> fmt::Result {
        writeln!(
            f,
            "{:<18} {:>28}   {:>28}",
            "function", "ops before", "ops after"
        )?;
        for p in &self.per_function {
            writeln!(
                f,
                "{:<18} {:>28} → {:>28}",
                p.name,
                ops(&p.before),
                ops(&p.after)
            )?;
        }
        writeln!(
            f,
            "{:<18} {:>28} → {:>28}",
            "all (shared once)",
            ops(&self.total_before),
            ops(&self.total_after)
        )?;
        writeln!(
            f,
            "nodes {} → {}; exact stages (Horner, linear sums) → {} in {:.2?}",
            self.nodes_before,
            self.nodes_after,
            ops(&self.after_factoring).trim_start(),
            self.factoring_time
        )?;
        let e = &self.egraph;
        writeln!(
            f,
            "e-graph: {} windows, {} improved, largest {} e-nodes / {} e-classes, {:.2?}",
            e.windows, e.improved, e.max_egraph_nodes, e.max_egraph_classes, e.time
        )?;
        writeln!(
            f,
            "limits hit: node {} (overshot {}), iteration {}, time {}, windows skipped for time {}",
            e.hit_node_limit,
            e.overshot_node_limit,
            e.hit_iteration_limit,
            e.hit_time_limit,
            e.skipped_for_time
        )?;
        write!(f, "total {:.2?}", self.elapsed)
    }
}
