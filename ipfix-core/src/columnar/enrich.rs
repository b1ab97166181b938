//! What options records tell about the data records of the same exporter
//! and Observation Domain: interface and VRF names, samplers, and the
//! system init time that anchors sysUpTime timestamps.

use std::collections::{BTreeSet, HashMap};
use std::hash::{BuildHasherDefault, Hasher};
use std::net::IpAddr;
use std::sync::Arc;

use crate::field::ObservationDomainId;
use crate::ie::id;
use crate::record::{Record, Value};
use crate::session::DataSet;

/// A multiplicative hasher for small integer keys (ifIndex, VRF id, sampler
/// id). Maps filled from the network are capped (see [`Enrichment`]), which
/// bounds the damage of deliberately colliding keys.
#[derive(Debug, Default, Clone, Copy)]
pub(crate) struct IdHasher(u64);

impl Hasher for IdHasher {
    fn write(&mut self, bytes: &[u8]) {
        for b in bytes {
            self.write_u64(u64::from(*b));
        }
    }
    fn write_u32(&mut self, n: u32) {
        self.write_u64(u64::from(n));
    }
    fn write_u64(&mut self, n: u64) {
        self.0 = (self.0.rotate_left(5) ^ n).wrapping_mul(0x51_7c_c1_b7_27_22_0a_95);
    }
    fn finish(&self) -> u64 {
        self.0
    }
}

pub(crate) type IdMap<K, V> = HashMap<K, V, BuildHasherDefault<IdHasher>>;

/// Most Observation Domains (over all exporters) tracked.
const MAX_DOMAINS: usize = 65_536;
/// Most keys (interfaces, VRFs, samplers, selectors) per domain and kind.
const MAX_KEYS: usize = 65_536;
/// Most distinct values kept over time for one key.
const MAX_TIMELINE: usize = 64;

/// Values of one key over Export Time: the value that applies to a record
/// is the latest one sent at or before the record's Export Time, else the
/// earliest (options data usually precedes the data it describes, RFC 5655
/// §7.2, but over UDP it may arrive later).
#[derive(Debug, Clone)]
pub(crate) struct Timeline<T> {
    entries: Vec<(u32, T)>,
}

impl<T> Default for Timeline<T> {
    fn default() -> Self {
        Self { entries: Vec::new() }
    }
}

impl<T: PartialEq> Timeline<T> {
    /// Records `value` as of `time`. Returns false when the timeline is
    /// full and the value was dropped.
    fn insert(&mut self, time: u32, value: T) -> bool {
        let pos = self.entries.partition_point(|(t, _)| *t <= time);
        if let Some(prev) = pos.checked_sub(1).and_then(|p| self.entries.get_mut(p)) {
            if prev.1 == value {
                return true; // a refresh of the value in force
            }
            if prev.0 == time {
                prev.1 = value;
                return true;
            }
        }
        if self.entries.len() >= MAX_TIMELINE {
            return false;
        }
        self.entries.insert(pos, (time, value));
        true
    }

    /// The value in force at `time`.
    pub(crate) fn at(&self, time: u32) -> Option<&T> {
        if let [(_, only)] = self.entries.as_slice() {
            return Some(only);
        }
        let pos = self.entries.partition_point(|(t, _)| *t <= time);
        self.entries.get(pos.saturating_sub(1)).map(|(_, v)| v)
    }
}

/// Sampling parameters found in one record (data or options).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub(crate) struct SamplingParams {
    /// samplingInterval (34).
    pub interval: Option<u64>,
    /// samplerRandomInterval (50).
    pub random_interval: Option<u64>,
    /// samplingPacketInterval (305).
    pub packet_interval: Option<u64>,
    /// samplingPacketSpace (306).
    pub packet_space: Option<u64>,
    /// samplingSize (309).
    pub size: Option<u64>,
    /// samplingPopulation (310).
    pub population: Option<u64>,
    /// samplingProbability (311).
    pub probability: Option<f64>,
}

impl SamplingParams {
    /// Takes the value of element `ie` if it is a sampling parameter.
    pub(crate) fn take(&mut self, ie: u16, value: &Value<'_>) -> bool {
        match (ie, value) {
            (id::SAMPLING_INTERVAL, Value::Unsigned(v)) => self.interval = Some(*v),
            (id::SAMPLER_RANDOM_INTERVAL, Value::Unsigned(v)) => self.random_interval = Some(*v),
            (id::SAMPLING_PACKET_INTERVAL, Value::Unsigned(v)) => self.packet_interval = Some(*v),
            (id::SAMPLING_PACKET_SPACE, Value::Unsigned(v)) => self.packet_space = Some(*v),
            (id::SAMPLING_SIZE, Value::Unsigned(v)) => self.size = Some(*v),
            (id::SAMPLING_POPULATION, Value::Unsigned(v)) => self.population = Some(*v),
            (id::SAMPLING_PROBABILITY, Value::Float(v)) => self.probability = Some(*v),
            _ => return false,
        }
        true
    }

    /// N of "1 in N" (facts sheet §8.3, after RFC 5474 §5.4: the scale
    /// factor is the inverse of the selection fraction), rounded to the
    /// nearest integer:
    /// - samplingPacketInterval/Space (305/306, systematic count-based):
    ///   (interval + space) / interval (RFC 5476 §6.5.2.1: 1-in-10 is
    ///   interval 1, space 9);
    /// - samplingSize/Population (309/310, random n-out-of-N): N / n;
    /// - samplingProbability (311, uniform probabilistic): 1 / p;
    /// - samplingInterval (34): N itself ("100 ⇒ 1 of every 100", IANA);
    /// - samplerRandomInterval (50): N itself (from memory, unconfirmed).
    ///
    /// In that order of preference. `None` when nothing usable is present
    /// (a zero interval, size or probability; a probability above 1; a
    /// factor beyond u32).
    pub(crate) fn rate(&self) -> Option<u32> {
        let ratio = |num: f64, den: f64| -> Option<u32> {
            let r = (num / den).round();
            (den > 0.0 && r >= 1.0 && r <= f64::from(u32::MAX)).then_some(r as u32)
        };
        if let (Some(i), Some(s)) = (self.packet_interval, self.packet_space) {
            if i > 0 {
                return ratio(i.saturating_add(s) as f64, i as f64);
            }
        }
        if let (Some(n), Some(pop)) = (self.size, self.population) {
            if n > 0 && pop >= n {
                return ratio(pop as f64, n as f64);
            }
        }
        if let Some(p) = self.probability {
            if p > 0.0 && p <= 1.0 {
                return ratio(1.0, p);
            }
        }
        [self.interval, self.random_interval]
            .into_iter()
            .flatten()
            .find(|n| *n > 0)
            .and_then(|n| u32::try_from(n).ok())
    }
}

/// What one exporter+domain's options records said.
#[derive(Debug, Default)]
pub(crate) struct DomainInfo {
    /// systemInitTimeMilliseconds (160), ms since the UNIX epoch.
    pub(crate) init_ms: Timeline<i64>,
    /// samplerId (48) → N.
    pub(crate) samplers: IdMap<u64, Timeline<u32>>,
    /// selectorId (302) → N.
    pub(crate) selectors: IdMap<u64, Timeline<u32>>,
    /// Sampling parameters in options records naming no sampler/selector.
    pub(crate) unscoped_rate: Timeline<u32>,
    /// Every rate any options record of the domain gave.
    pub(crate) distinct_rates: BTreeSet<u32>,
    /// ifIndex (ingressInterface/egressInterface) → interfaceName.
    pub(crate) interfaces: IdMap<u32, Timeline<Arc<str>>>,
    /// VRF id (ingressVRFID/egressVRFID) → VRFname.
    pub(crate) vrfs: IdMap<u32, Timeline<Arc<str>>>,
}

impl DomainInfo {
    /// The rate for a record that names no sampler or selector: the one
    /// rate all of the domain's options records agree on. `Err(())` when
    /// they disagree.
    pub(crate) fn fallback_rate(&self, time: u32) -> Result<Option<u32>, ()> {
        match self.distinct_rates.len() {
            0 => Ok(None),
            1 => Ok(self.distinct_rates.first().copied()),
            _ => self.unscoped_rate.at(time).map(|r| Some(*r)).ok_or(()),
        }
    }
}

/// Counters of an [`Enrichment`].
#[derive(Debug, Clone, Default, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "camelCase")]
#[non_exhaustive]
pub struct EnrichmentStats {
    /// Options records offered.
    pub options_records: u64,
    /// Of those, records that taught something (a name, a rate, an init time).
    pub options_records_used: u64,
    /// interfaceName values learned (refreshes included).
    pub interface_names: u64,
    /// VRFname values learned.
    pub vrf_names: u64,
    /// Sampling rates learned.
    pub sampling_rates: u64,
    /// systemInitTimeMilliseconds values learned.
    pub init_times: u64,
    /// Values dropped because a bound was reached (domains, keys, or
    /// distinct values over time).
    pub dropped_limit: u64,
}

type DomainKey = (Option<IpAddr>, u32);

/// Lookups built from options records in the first pass and used by the
/// derived columns in the second.
///
/// Keyed by exporter IP address and Observation Domain ID: the exporter is
/// the transport source (`None` for RFC 5655 files, so all files given to
/// one enrichment share it), the domain is the Message Header's, or the
/// value of an observationDomainId (149) scope field when the record has
/// one (RFC 7011 §3.4.2.1 lists it as a scope). What an options record says:
///
/// | options record carries | lookup | used for |
/// |---|---|---|
/// | ingressInterface (10) or egressInterface (14), interfaceName (82) | ifIndex → name | `ingressInterfaceName`, `egressInterfaceName` |
/// | ingressVRFID (234) or egressVRFID (235), VRFname (236) | VRF id → name | `ingressVRFname`, `egressVRFname` |
/// | samplerId (48) and sampling parameters | sampler → N | `samplingRate` of records naming that samplerId |
/// | selectorId (302) and sampling parameters | selector → N | `samplingRate` of records naming that selectorId |
/// | sampling parameters and neither id | domain → N | `samplingRate` fallback |
/// | systemInitTimeMilliseconds (160) | domain → init time | `flowStart/EndTime` from sysUpTime |
///
/// The key elements count whether or not they are scope fields; one
/// interface map serves both directions, as does one VRF map.
///
/// Sampling parameters give N of "1 in N" (facts sheet §8.3, after RFC
/// 5474 §5.4: the scale factor is the inverse of the selection fraction),
/// rounded to the nearest integer, in this order of preference:
/// samplingPacketInterval/Space (305/306): (interval + space) / interval
/// (RFC 5476 §6.5.2.1: 1 in 10 is interval 1, space 9);
/// samplingSize/Population (309/310): N / n; samplingProbability (311):
/// 1 / p; samplingInterval (34): N itself (IANA: 100 means 1 of every 100);
/// samplerRandomInterval (50): N itself (from memory, unconfirmed). The
/// same rules apply to sampling elements inside data records. Values change
/// over time (a device restarts, an interface is renamed): each is kept
/// with the Export Time of its message, and a record gets the value in
/// force at its own Export Time. Memory is bounded: at most 65,536 domains,
/// 65,536 keys of each kind per domain and 64 distinct values per key;
/// what does not fit is counted in [`EnrichmentStats::dropped_limit`].
#[derive(Debug, Default)]
pub struct Enrichment {
    domains: HashMap<DomainKey, DomainInfo>,
    stats: EnrichmentStats,
}

impl Enrichment {
    /// An empty enrichment: derived columns that need options data are null.
    pub fn new() -> Self {
        Self::default()
    }

    /// Counters so far.
    pub const fn stats(&self) -> &EnrichmentStats {
        &self.stats
    }

    /// Takes every record of an options Data Set; returns how many taught
    /// something. A non-options set is ignored (returns 0).
    pub fn add_options_set(&mut self, set: &DataSet<'_>) -> usize {
        if !set.plan().is_options() {
            return 0;
        }
        let exporter = set.session().exporter.map(|a| a.ip());
        let mut used = 0;
        for record in set.records() {
            used += usize::from(self.add_options_record(exporter, set.domain(), set.export_time(), &record));
        }
        used
    }

    /// Takes one options record sent by `exporter` in `domain` in a message
    /// with Export Time `export_time`. Returns true when it taught something.
    pub fn add_options_record(
        &mut self,
        exporter: Option<IpAddr>,
        domain: ObservationDomainId,
        export_time: u32,
        record: &Record<'_>,
    ) -> bool {
        self.stats.options_records += 1;
        let mut domain_id = domain.0;
        let (mut if_index, mut vrf_id, mut sampler, mut selector) = (None, None, None, None);
        let (mut if_name, mut vrf_name, mut init_ms) = (None, None, None);
        let mut params = SamplingParams::default();
        for field in record.fields() {
            let element = field.spec.spec.element;
            if element.enterprise.is_some() || field.spec.occurrence > 1 {
                continue;
            }
            let v = &field.value;
            match (element.id, v) {
                (id::OBSERVATION_DOMAIN_ID, Value::Unsigned(d)) if field.spec.is_scope => {
                    domain_id = u32::try_from(*d).unwrap_or(domain_id);
                }
                (id::INGRESS_INTERFACE | id::EGRESS_INTERFACE, Value::Unsigned(i)) => {
                    if_index = if_index.or(u32::try_from(*i).ok());
                }
                (id::INGRESS_VRFID | id::EGRESS_VRFID, Value::Unsigned(i)) => {
                    vrf_id = vrf_id.or(u32::try_from(*i).ok());
                }
                (id::SAMPLER_ID, Value::Unsigned(s)) => sampler = Some(*s),
                (id::SELECTOR_ID, Value::Unsigned(s)) => selector = Some(*s),
                (id::INTERFACE_NAME, Value::String(s)) => if_name = Some(*s),
                (id::VRF_NAME, Value::String(s)) => vrf_name = Some(*s),
                (id::SYSTEM_INIT_TIME_MILLISECONDS, Value::DateTime(t)) => init_ms = Some(t.unix_millis()),
                (ie, v) => {
                    params.take(ie, v);
                }
            }
        }
        let rate = params.rate();
        if if_name.is_none() && vrf_name.is_none() && init_ms.is_none() && rate.is_none() {
            return false;
        }
        let key = (exporter, domain_id);
        if !self.domains.contains_key(&key) && self.domains.len() >= MAX_DOMAINS {
            self.stats.dropped_limit += 1;
            return false;
        }
        let info = self.domains.entry(key).or_default();
        let s = &mut self.stats;
        let mut learned = false;
        if let (Some(i), Some(name)) = (if_index, if_name) {
            let ok = insert_keyed(&mut info.interfaces, i, export_time, Arc::from(name));
            tally(ok, &mut s.interface_names, &mut s.dropped_limit, &mut learned);
        }
        if let (Some(i), Some(name)) = (vrf_id, vrf_name) {
            let ok = insert_keyed(&mut info.vrfs, i, export_time, Arc::from(name));
            tally(ok, &mut s.vrf_names, &mut s.dropped_limit, &mut learned);
        }
        if let Some(ms) = init_ms {
            let ok = info.init_ms.insert(export_time, ms);
            tally(ok, &mut s.init_times, &mut s.dropped_limit, &mut learned);
        }
        if let Some(n) = rate {
            let ok = match (sampler, selector) {
                (Some(id), _) => insert_keyed(&mut info.samplers, id, export_time, n),
                (None, Some(id)) => insert_keyed(&mut info.selectors, id, export_time, n),
                (None, None) => info.unscoped_rate.insert(export_time, n),
            };
            if ok && info.distinct_rates.len() < MAX_KEYS {
                info.distinct_rates.insert(n);
            }
            tally(ok, &mut s.sampling_rates, &mut s.dropped_limit, &mut learned);
        }
        if learned {
            self.stats.options_records_used += 1;
        }
        learned
    }

    pub(crate) fn domain(&self, exporter: Option<IpAddr>, domain: u32) -> Option<&DomainInfo> {
        self.domains.get(&(exporter, domain))
    }

    /// The interfaceName of ifIndex `if_index` in force at `export_time`.
    pub fn interface_name(&self, exporter: Option<IpAddr>, domain: ObservationDomainId, if_index: u32, export_time: u32) -> Option<&str> {
        self.domain(exporter, domain.0)?.interfaces.get(&if_index)?.at(export_time).map(|s| &**s)
    }

    /// The VRFname of VRF id `vrf` in force at `export_time`.
    pub fn vrf_name(&self, exporter: Option<IpAddr>, domain: ObservationDomainId, vrf: u32, export_time: u32) -> Option<&str> {
        self.domain(exporter, domain.0)?.vrfs.get(&vrf)?.at(export_time).map(|s| &**s)
    }

    /// systemInitTimeMilliseconds (ms since the UNIX epoch) in force at
    /// `export_time`.
    pub fn system_init_time_ms(&self, exporter: Option<IpAddr>, domain: ObservationDomainId, export_time: u32) -> Option<i64> {
        self.domain(exporter, domain.0)?.init_ms.at(export_time).copied()
    }

    /// The sampling rate N (1 in N) for a record naming `sampler` (samplerId)
    /// or `selector` (selectorId), or neither: then the one rate the
    /// domain's options records agree on (several samplers with the same
    /// rate count as one; with different rates, the rate of an options
    /// record naming no sampler, if any; else `None`).
    pub fn sampling_rate(
        &self,
        exporter: Option<IpAddr>,
        domain: ObservationDomainId,
        sampler: Option<u64>,
        selector: Option<u64>,
        export_time: u32,
    ) -> Option<u32> {
        let info = self.domain(exporter, domain.0)?;
        match (sampler, selector) {
            (Some(s), _) => info.samplers.get(&s)?.at(export_time).copied(),
            (None, Some(s)) => info.selectors.get(&s)?.at(export_time).copied(),
            (None, None) => info.fallback_rate(export_time).ok().flatten(),
        }
    }
}

fn tally(ok: bool, counter: &mut u64, dropped: &mut u64, learned: &mut bool) {
    if ok {
        *counter += 1;
        *learned = true;
    } else {
        *dropped += 1;
    }
}

fn insert_keyed<K: std::hash::Hash + Eq, T: PartialEq>(map: &mut IdMap<K, Timeline<T>>, key: K, time: u32, value: T) -> bool {
    if !map.contains_key(&key) && map.len() >= MAX_KEYS {
        return false;
    }
    map.entry(key).or_default().insert(time, value)
}
