//! Which slice of a sweep this process runs — `i/n` given by hand, or `auto`, read from a batch
//! scheduler's environment (a Slurm job array or a Kubernetes indexed Job) — and the command that
//! runs another slice of the same sweep, so a sweep with missing slices can be finished.
//!
//! The Slurm variables are those of the sbatch manual page (Slurm 22.05, "OUTPUT ENVIRONMENT
//! VARIABLES"); the Kubernetes one is the Job documentation's "Indexed completion mode", which
//! sets `JOB_COMPLETION_INDEX` but no count: the count comes from [`COUNT_VARIABLE`].

use serde::{Deserialize, Serialize};

/// The variable giving the number of shards where the scheduler does not say it (a Kubernetes
/// indexed Job: set it to the Job's `completions`).
pub const COUNT_VARIABLE: &str = "RELUME_SHARD_COUNT";

const SLURM_ID: &str = "SLURM_ARRAY_TASK_ID";
const SLURM_COUNT: &str = "SLURM_ARRAY_TASK_COUNT";
const SLURM_MIN: &str = "SLURM_ARRAY_TASK_MIN";
const SLURM_MAX: &str = "SLURM_ARRAY_TASK_MAX";
const SLURM_STEP: &str = "SLURM_ARRAY_TASK_STEP";
const INDEXED_JOB: &str = "JOB_COMPLETION_INDEX";

/// One slice of a sweep: the cells whose index ≡ `index` (mod `count`).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Shard {
    /// 0 ≤ index < count.
    pub index: usize,
    /// Number of shards, ≥ 1.
    pub count: usize,
    /// Where the numbers came from, for the log ("given", or the scheduler's variables).
    pub source: String,
}

/// Reads `--shard` text: `i/n`, or `auto` to take the shard from the environment through `env`
/// (a variable's value, or None when it is not set).
pub fn resolve(text: &str, env: impl Fn(&str) -> Option<String>) -> Result<Shard, String> {
    if text.trim() == "auto" {
        return from_environment(env);
    }
    let bad = || format!("--shard '{text}': expected i/n with 0 <= i < n, or auto");
    let (i, n) = text.split_once('/').ok_or_else(bad)?;
    let (index, count): (usize, usize) = (
        i.trim().parse().map_err(|_| bad())?,
        n.trim().parse().map_err(|_| bad())?,
    );
    if count == 0 || index >= count {
        return Err(bad());
    }
    Ok(Shard {
        index,
        count,
        source: "given".to_string(),
    })
}

/// `--shard auto`: the shard of this Slurm array task or Kubernetes indexed Job pod.
pub fn from_environment(env: impl Fn(&str) -> Option<String>) -> Result<Shard, String> {
    // An empty value counts as unset: a manifest may declare a variable and leave it blank.
    let get = |name: &str| env(name).filter(|v| !v.trim().is_empty());
    match (get(SLURM_ID), get(INDEXED_JOB)) {
        (None, None) => Err(format!(
            "--shard auto: no shard index in the environment: neither {SLURM_ID} (a Slurm job \
             array task) nor {INDEXED_JOB} (a Kubernetes indexed Job) is set; outside a \
             scheduler give --shard i/n"
        )),
        (Some(s), Some(k)) => Err(format!(
            "--shard auto: both {SLURM_ID}={s} and {INDEXED_JOB}={k} are set, so the shard is \
             ambiguous: unset one of them"
        )),
        (Some(id), None) => slurm(&id, &get),
        (None, Some(index)) => indexed_job(&index, &get),
    }
}

fn number(name: &str, value: &str) -> Result<usize, String> {
    value
        .trim()
        .parse()
        .map_err(|_| format!("--shard auto: {name}='{value}': expected a whole number"))
}

fn optional(name: &str, get: &impl Fn(&str) -> Option<String>) -> Result<Option<usize>, String> {
    get(name).map(|v| number(name, &v)).transpose()
}

/// A Slurm array task: the index is the task id's place in the array's ids (which need not
/// start at 0), the count comes from the array's size or its id range.
fn slurm(id: &str, get: &impl Fn(&str) -> Option<String>) -> Result<Shard, String> {
    let id = number(SLURM_ID, id)?;
    let size = optional(SLURM_COUNT, get)?;
    let min = optional(SLURM_MIN, get)?;
    let max = optional(SLURM_MAX, get)?;
    let own = optional(COUNT_VARIABLE, get)?;
    let step = optional(SLURM_STEP, get)?.unwrap_or(1);
    if step == 0 {
        return Err(format!(
            "--shard auto: {SLURM_STEP}=0: a step must be at least 1"
        ));
    }
    let span = match (min, max) {
        (Some(lo), Some(hi)) if hi < lo => {
            return Err(format!(
                "--shard auto: {SLURM_MAX}={hi} is below {SLURM_MIN}={lo}"
            ))
        }
        (Some(lo), Some(hi)) => Some((hi - lo) / step + 1),
        _ => None,
    };
    if let (Some(size), Some(span)) = (size, span) {
        if size != span {
            return Err(format!(
                "--shard auto: {SLURM_COUNT}={size}, but ids {}..={} in steps of {step} make \
                 {span}: the array's ids are not an evenly spaced range (as with --array=1,4,9); \
                 submit a range such as --array=0-{}",
                min.unwrap_or(0),
                max.unwrap_or(0),
                size - 1
            ));
        }
    }
    let Some(count) = size.or(span).or(own) else {
        return Err(format!(
            "--shard auto: {SLURM_ID}={id} is set but not the array's size: need \
             {SLURM_COUNT}, or {SLURM_MIN} and {SLURM_MAX}, or {COUNT_VARIABLE}"
        ));
    };
    if count == 0 {
        return Err(format!(
            "--shard auto: the array has 0 tasks ({SLURM_COUNT}=0)"
        ));
    }
    if let Some(own) = own {
        if own != count {
            return Err(format!(
                "--shard auto: {COUNT_VARIABLE}={own} but the Slurm array has {count} tasks: \
                 unset {COUNT_VARIABLE} or make it {count}"
            ));
        }
    }
    let lo = min.unwrap_or(0);
    let place = id
        .checked_sub(lo)
        .filter(|d| d % step == 0)
        .map(|d| d / step)
        .filter(|&i| i < count);
    let Some(index) = place else {
        let start = if min.is_some() {
            String::new()
        } else {
            format!(" ({SLURM_MIN} is not set, so the ids are taken to start at 0)")
        };
        return Err(format!(
            "--shard auto: {SLURM_ID}={id} is not one of the array's {count} ids {lo}, {}, .. \
             in steps of {step}{start}",
            lo + step
        ));
    };
    Ok(Shard {
        index,
        count,
        source: format!(
            "Slurm array task {id} of --array={lo}-{}{}",
            lo + (count - 1) * step,
            if step > 1 {
                format!(":{step}")
            } else {
                String::new()
            }
        ),
    })
}

/// A Kubernetes indexed Job pod: the index is the completion index, the count comes from
/// [`COUNT_VARIABLE`].
fn indexed_job(index: &str, get: &impl Fn(&str) -> Option<String>) -> Result<Shard, String> {
    let index = number(INDEXED_JOB, index)?;
    let Some(count) = optional(COUNT_VARIABLE, get)? else {
        return Err(format!(
            "--shard auto: {INDEXED_JOB}={index} is set (a Kubernetes indexed Job) but not the \
             shard count: set {COUNT_VARIABLE} to the Job's completions"
        ));
    };
    if index >= count {
        return Err(format!(
            "--shard auto: {INDEXED_JOB}={index} is not below {COUNT_VARIABLE}={count}: make \
             {COUNT_VARIABLE} equal to the Job's completions"
        ));
    }
    Ok(Shard {
        index,
        count,
        source: format!("Kubernetes completion index {index}, {COUNT_VARIABLE}={count}"),
    })
}

/// The command that made a report: its working directory and its arguments (program first).
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Invocation {
    /// Working directory, where relative paths in `args` start.
    pub dir: String,
    /// The arguments, the program's name or path first.
    pub args: Vec<String>,
}

impl Invocation {
    /// This process's invocation.
    pub fn current() -> Invocation {
        Invocation {
            dir: std::env::current_dir()
                .map_or_else(|_| ".".to_string(), |d| d.to_string_lossy().into_owned()),
            args: std::env::args_os()
                .map(|a| a.to_string_lossy().into_owned())
                .collect(),
        }
    }

    /// The same command for shard `index`/`count`, writing its report to `report`: `--shard`
    /// and `--report` (either `--name value` or `--name=value`) are replaced or added.
    pub fn for_shard(&self, index: usize, count: usize, report: &str) -> Invocation {
        let shard = format!("{index}/{count}");
        let mut args = Vec::with_capacity(self.args.len() + 4);
        let (mut has_shard, mut has_report) = (false, false);
        let mut it = self.args.iter();
        while let Some(a) = it.next() {
            match a.as_str() {
                "--shard" | "--report" => {
                    let value = if a == "--shard" { &shard } else { report };
                    has_shard |= a == "--shard";
                    has_report |= a == "--report";
                    it.next();
                    args.extend([a.clone(), value.to_string()]);
                }
                _ if a.starts_with("--shard=") => {
                    has_shard = true;
                    args.push(format!("--shard={shard}"));
                }
                _ if a.starts_with("--report=") => {
                    has_report = true;
                    args.push(format!("--report={report}"));
                }
                _ => args.push(a.clone()),
            }
        }
        if !has_shard {
            args.extend(["--shard".to_string(), shard]);
        }
        if !has_report {
            args.extend(["--report".to_string(), report.to_string()]);
        }
        Invocation {
            dir: self.dir.clone(),
            args,
        }
    }

    /// The value of `--report` (either form), if there is one.
    pub fn report(&self) -> Option<&str> {
        let mut it = self.args.iter();
        while let Some(a) = it.next() {
            if a == "--report" {
                return it.next().map(String::as_str);
            }
            if let Some(v) = a.strip_prefix("--report=") {
                return Some(v);
            }
        }
        None
    }

    /// A POSIX shell command line: `cd DIR && ARGS`, every word quoted where it needs it.
    pub fn shell(&self) -> String {
        let words: Vec<String> = self.args.iter().map(|a| quote(a)).collect();
        format!("cd {} && {}", quote(&self.dir), words.join(" "))
    }
}

/// Single-quotes a word unless it is made only of characters no POSIX shell treats specially.
fn quote(word: &str) -> String {
    let plain = |c: char| c.is_ascii_alphanumeric() || "_./=:,@%+-".contains(c);
    if !word.is_empty() && word.chars().all(plain) {
        word.to_string()
    } else {
        format!("'{}'", word.replace('\'', r"'\''"))
    }
}
