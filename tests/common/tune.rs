//! Tuning overrides for measurement runs, read from `EQUISCAN_BENCH_TUNE` (comma-separated
//! `key=value`), so that a changed default can be measured on the benchmarks before it is made
//! the default. Unset, the parameters are left as they are.
//!
//! Keys: `radius` (support radius in the pair's automatic voxel sizes), `keypoints` (a factor
//! on the keypoint count: the voxel becomes the automatic one over √factor, the radius stays
//! `radius` automatic voxels when that key comes first, else the method's default in new
//! voxels), `inner` / `third` ([`Tuning::inner_radius_share`], [`Tuning::third_radius_share`]),
//! `ambiguity` ([`Tuning::rotation_ambiguity_margin`]), `eq_ransac`
//! ([`Tuning::equivariant_ransac`]), `partners`, `pair_turn` ([`Tuning::pair_partners`],
//! [`Tuning::pair_turn_deg`]), `fpfh_matches` (0 or 1, [`Tuning::baseline_matches`]), `version` (descriptor version),
//! `min_keep`, `max_keep`, `ratio`, `neighbours` (matching), `explain`, `interleave` (0 or 1),
//! `list`, `list_share` ([`Tuning::list_rivalry`], [`Tuning::list_overlap_share`]),
//! `distinct_angle`, `distinct_taus` ([`Tuning::distinct_angle_deg`] and its distance),
//! `answer_lead`, `answer_matches`, `answer_pool`, `answer_fine_lead`
//! ([`Tuning::answer_overlap_lead`] — 2 turns the answer's overlap rule off —,
//! [`Tuning::answer_min_explained`], [`Tuning::answer_fine_pool`] — 0 chooses on the coarse
//! poses' keypoints — and [`Tuning::answer_fine_lead`]), `pool` (hypotheses and ranking: DEVELOPERS.md, Registration, "Hypotheses: where the truth
//! is found"), `icp_sample`, `coarse_tolerance`, `alt_iterations`
//! ([`Tuning::alternative_icp_iterations`]), `self_maps`, `self_queries`, `self_overlap`
//! (near-self-symmetries, [`Tuning::self_maps`] …), `revolve_step`, `revolve_ratio`, `revolve_icp`
//! (turns about the axis of near-revolution, [`Tuning::revolution_step_deg`] …), `pin_directions`,
//! `pin_turn`, `pin_slide`, `pin_angle`, `pin_distance`, `pin_margin` (the restart test,
//! [`Tuning::pin_directions`] …), `list_fine` (0 or 1, [`Tuning::list_fine_fit`]), `fine_distance`, `fine_final`,
//! `consensus_coarse` (0 or 1) ([`Tuning::fine_max_distance_taus`],
//! [`Tuning::fine_final_distance_taus`], [`Tuning::consensus_at_coarse`]), `rival_lead`
//! ([`Tuning::rival_overlap_lead`]), `slide_range`, `slide_share` ([`Tuning::slide_range_taus`],
//! [`Tuning::slide_min_share`]), `side` ([`Tuning::side_weight`]), `held_turns`, `held_step`,
//! `held_share` (0 or 1) (turns held about the axis, [`Tuning::held_turns`] …), `smooth` (0 or 1,
//! [`Tuning::fine_smoothing`]), `spread`, `smooth_k`, `smooth_src` (0 or 1)
//! ([`Tuning::fine_smoothing_spread`] …), `reverse_max` ([`Tuning::reverse_fit_max_deg`]),
//! `fpfh_consensus` ([`Tuning::fpfh_min_consensus`]).

use equiscan::Cloud;
use equiscan::align::prepared_scan::pair_voxel;
use equiscan::align::{AlignParams, Tuning};

/// `params` with the overrides of `EQUISCAN_BENCH_TUNE` applied for the pair (`source`,
/// `target`); panics naming the entry when one cannot be read.
pub fn tuned(mut params: AlignParams, source: &Cloud, target: &Cloud) -> AlignParams {
    let Ok(spec) = std::env::var("EQUISCAN_BENCH_TUNE") else {
        return params;
    };
    let voxel = |p: &AlignParams| {
        pair_voxel(p, ("source", source), ("target", target)).expect("automatic voxel size")
    };
    for entry in spec.split(',').filter(|e| !e.is_empty()) {
        let (key, value) = entry
            .split_once('=')
            .unwrap_or_else(|| panic!("EQUISCAN_BENCH_TUNE: {entry} is not key=value"));
        let x: f64 = value
            .parse()
            .unwrap_or_else(|_| panic!("EQUISCAN_BENCH_TUNE: {entry} has no number"));
        let tu: &mut Tuning = &mut params.tuning;
        match key {
            "inner" => tu.inner_radius_share = x,
            "third" => tu.third_radius_share = x,
            "ambiguity" => tu.rotation_ambiguity_margin = x,
            "eq_ransac" => tu.equivariant_ransac = x as usize,
            "fpfh_matches" => tu.baseline_matches = x != 0.0,
            "partners" => tu.pair_partners = x as usize,
            "pair_turn" => tu.pair_turn_deg = x,
            "min_keep" => tu.match_min_keep = x as usize,
            "max_keep" => tu.match_max_keep = x as usize,
            "ratio" => tu.match_max_ratio = x as f32,
            "neighbours" => tu.match_neighbours = x as usize,
            "pool" => tu.shortlist_pool = x as usize,
            "interleave" => tu.rank_interleave = x != 0.0,
            "explain" => tu.neighbours_explain = x != 0.0,
            "icp_sample" => tu.icp_sample = x as usize,
            "coarse_tolerance" => tu.icp_coarse_tolerance = x,
            "list" => tu.list_rivalry = x,
            "distinct_angle" => tu.distinct_angle_deg = x,
            "distinct_taus" => tu.distinct_distance_taus = x,
            "list_share" => tu.list_overlap_share = x,
            "rival_overlap" => tu.rival_overlap_share = x,
            "rival_matches" => tu.rival_match_share = x,
            "rival_lead" => tu.rival_overlap_lead = x,
            "rival_near" => tu.rival_near_overlap = x,
            "rival_off_plane" => tu.rival_off_plane_share = x,
            "slide_range" => tu.slide_range_taus = x,
            "slide_share" => tu.slide_min_share = x,
            "side" => tu.side_weight = x,
            "answer_lead" => tu.answer_overlap_lead = x,
            "answer_matches" => tu.answer_min_explained = x as usize,
            "answer_pool" => tu.answer_fine_pool = x as usize,
            "answer_fine_lead" => tu.answer_fine_lead = x,
            "alt_iterations" => tu.alternative_icp_iterations = x as usize,
            "self_maps" => tu.self_maps = x as usize,
            "self_queries" => tu.self_map_queries = x as usize,
            "self_overlap" => tu.self_map_overlap = x,
            "version" => params.descriptor_version = x as u32,
            "radius" => params.radius = Some(x * voxel(&params)),
            "keypoints" => params.voxel = Some(voxel(&params) / x.sqrt()),
            "revolve_step" => tu.revolution_step_deg = x,
            "revolve_ratio" => tu.revolution_max_ratio = x,
            "revolve_icp" => tu.revolution_icp_distance_taus = x,
            "held_turns" => tu.held_turns = x as usize,
            "held_step" => tu.held_turn_step_deg = x,
            "held_share" => tu.held_turn_fit_share = x != 0.0,
            "smooth" => tu.fine_smoothing = x != 0.0,
            "spread" => tu.fine_smoothing_spread = x,
            "smooth_k" => tu.fine_smoothing_neighbours = x as usize,
            "smooth_src" => tu.fine_smoothing_source = x != 0.0,
            "pin_directions" => tu.pin_directions = x as usize,
            "pin_turn" => tu.pin_turn_deg = x,
            "reverse_max" => tu.reverse_fit_max_deg = x,
            "fpfh_consensus" => tu.fpfh_min_consensus = x as usize,
            "pin_slide" => tu.pin_slide_taus = x,
            "pin_angle" => tu.pin_angle_deg = x,
            "pin_distance" => tu.pin_distance_taus = x,
            "pin_margin" => tu.pin_fit_margin = x,
            "list_fine" => tu.list_fine_fit = x != 0.0,
            "fine_distance" => tu.fine_max_distance_taus = x,
            "fine_final" => tu.fine_final_distance_taus = x,
            "consensus_coarse" => tu.consensus_at_coarse = x != 0.0,
            _ => panic!("EQUISCAN_BENCH_TUNE: unknown key {key}"),
        }
    }
    params
}
