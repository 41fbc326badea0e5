//! Hints from a model's `config.json` (and from a format's own metadata, such as GGUF
//! key/values): declared maximum positions, widths, rotary settings, initializer scale.
//!
//! Config files differ between model families, so each hint is looked up under the
//! names the common families use, first at the top level and then in nested
//! `text_config` / `vision_config` objects. A hint records the key it came from, so the
//! report can say "declared 2048 (config.json: max_position_embeddings)".

use std::path::Path;

use serde::Serialize;
use serde_json::Value;

pub use crate::checkpoint::limits::MAX_CONFIG_BYTES;

/// One value found in a config, with the key it came from.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Hint<T> {
    /// The value.
    pub value: T,
    /// The key it was read from (dotted for nested objects).
    pub key: String,
}

/// Everything posaudit reads from a model configuration.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct ConfigHints {
    /// Where the hints came from (a file path, or e.g. "GGUF metadata").
    pub source: String,
    /// `model_type` or the GGUF architecture.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub model_type: Option<String>,
    /// Declared maximum number of positions of the (text) model.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub max_positions: Option<Hint<u64>>,
    /// Declared maximum source (encoder) positions, for encoder-decoder models.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub max_source_positions: Option<Hint<u64>>,
    /// Hidden size (embedding width).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hidden_size: Option<Hint<u64>>,
    /// Number of attention heads.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub num_heads: Option<Hint<u64>>,
    /// Per-head width when given explicitly.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub head_dim: Option<Hint<u64>>,
    /// Rotary base θ.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub rope_theta: Option<Hint<f64>>,
    /// The rotary scaling object as written (`rope_scaling`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub rope_scaling: Option<Hint<Value>>,
    /// Fraction of the head width that is rotated.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub partial_rotary_factor: Option<Hint<f64>>,
    /// Standard deviation of the weight initializer.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub initializer_range: Option<Hint<f64>>,
    /// Multiplier of the T5 family's initializers (`initializer_factor`; std = factor·d_model^−0.5).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub initializer_factor: Option<Hint<f64>>,
    /// Number of relative-attention buckets (T5 family).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub relative_buckets: Option<Hint<u64>>,
    /// Largest relative distance with its own log bucket (T5 family).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub relative_max_distance: Option<Hint<u64>>,
    /// Input image size of a vision model.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub image_size: Option<Hint<u64>>,
    /// Patch size of a vision model.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub patch_size: Option<Hint<u64>>,
    /// Attention window size (windowed vision models).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub window_size: Option<Hint<u64>>,
    /// Padding token id (it decides reserved rows in some learned tables).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pad_token_id: Option<Hint<i64>>,
    /// How positions are encoded when the config says so ("absolute", "rotary", "alibi", ...).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub position_embedding_type: Option<Hint<String>>,
}

const NESTED: [&str; 3] = ["text_config", "vision_config", "encoder"];

fn lookup<'a>(root: &'a Value, keys: &[&str]) -> Option<(String, &'a Value)> {
    for key in keys {
        if let Some(v) = root.get(*key).filter(|v| !v.is_null()) {
            return Some((key.to_string(), v));
        }
    }
    for nest in NESTED {
        if let Some(obj) = root.get(nest) {
            for key in keys {
                if let Some(v) = obj.get(*key).filter(|v| !v.is_null()) {
                    return Some((format!("{nest}.{key}"), v));
                }
            }
        }
    }
    None
}

fn uint(root: &Value, keys: &[&str]) -> Option<Hint<u64>> {
    let (key, v) = lookup(root, keys)?;
    // Some configs give a list (image_size [224, 224]): take its first entry.
    let v = v.as_array().and_then(|a| a.first()).unwrap_or(v);
    let value = v.as_u64().or_else(|| {
        v.as_f64()
            .filter(|f| *f >= 0.0 && f.fract() == 0.0)
            .map(|f| f as u64)
    })?;
    Some(Hint { value, key })
}

fn float(root: &Value, keys: &[&str]) -> Option<Hint<f64>> {
    let (key, v) = lookup(root, keys)?;
    Some(Hint {
        value: v.as_f64()?,
        key,
    })
}

impl ConfigHints {
    /// Reads hints from a `config.json`. Returns a one-line reason when the file cannot
    /// be read or is not a JSON object.
    ///
    /// Only a regular file of at most [`MAX_CONFIG_BYTES`] (16 MiB) is read: the size is
    /// checked before reading, and a named pipe never blocks the run.
    pub fn read(path: &Path) -> Result<ConfigHints, String> {
        use crate::checkpoint::CheckpointError;
        let bytes = crate::checkpoint::read_small_file(path, MAX_CONFIG_BYTES, "config.json")
            .map_err(|e| match e {
                CheckpointError::Io { source, .. } => format!("cannot read: {source}"),
                CheckpointError::Invalid { problem, .. }
                | CheckpointError::NotACheckpoint { problem, .. } => problem,
            })?;
        let value: Value = serde_json::from_slice(&bytes).map_err(|e| {
            format!(
                "not valid JSON: {}",
                crate::checkpoint::limits::shown_max(&e.to_string(), 240)
            )
        })?;
        if !value.is_object() {
            return Err("not a JSON object".to_string());
        }
        Ok(Self::from_json(&value, &path.display().to_string()))
    }

    /// Extracts hints from a parsed config object.
    pub fn from_json(root: &Value, source: &str) -> ConfigHints {
        let alibi = root.get("alibi").and_then(Value::as_bool) == Some(true)
            || root
                .get("attn_config")
                .and_then(|a| a.get("alibi"))
                .and_then(Value::as_bool)
                == Some(true);
        let position_embedding_type = lookup(root, &["position_embedding_type"])
            .and_then(|(key, v)| {
                Some(Hint {
                    value: v.as_str()?.to_string(),
                    key,
                })
            })
            .or_else(|| {
                alibi.then(|| Hint {
                    value: "alibi".to_string(),
                    key: "alibi".to_string(),
                })
            });
        ConfigHints {
            source: source.to_string(),
            model_type: root
                .get("model_type")
                .and_then(Value::as_str)
                .map(str::to_string),
            max_positions: uint(
                root,
                &[
                    "max_position_embeddings",
                    "n_positions",
                    "n_ctx",
                    "max_seq_len",
                    "max_sequence_length",
                    "seq_length",
                    "max_target_positions",
                    "context_length",
                    "max_positions",
                    "block_size",
                    "num_positions",
                ],
            ),
            max_source_positions: uint(root, &["max_source_positions"]),
            hidden_size: uint(
                root,
                &[
                    "hidden_size",
                    "n_embd",
                    "d_model",
                    "dim",
                    "embed_dim",
                    "width",
                ],
            ),
            num_heads: uint(
                root,
                &[
                    "num_attention_heads",
                    "n_head",
                    "num_heads",
                    "n_heads",
                    "encoder_attention_heads",
                ],
            ),
            head_dim: uint(root, &["head_dim", "d_kv", "kv_channels"]),
            rope_theta: float(
                root,
                &["rope_theta", "rotary_emb_base", "rope_base", "rotary_base"],
            ),
            rope_scaling: lookup(root, &["rope_scaling"])
                .filter(|(_, v)| v.is_object())
                .map(|(key, v)| Hint {
                    value: v.clone(),
                    key,
                }),
            partial_rotary_factor: float(root, &["partial_rotary_factor", "rotary_pct"]),
            initializer_range: float(root, &["initializer_range", "init_std"]),
            initializer_factor: float(root, &["initializer_factor"]),
            relative_buckets: uint(root, &["relative_attention_num_buckets"]),
            relative_max_distance: uint(root, &["relative_attention_max_distance"]),
            image_size: uint(root, &["image_size", "img_size"]),
            patch_size: uint(root, &["patch_size"]),
            window_size: uint(root, &["window_size"]),
            pad_token_id: lookup(root, &["pad_token_id", "padding_idx"]).and_then(|(key, v)| {
                Some(Hint {
                    value: v.as_i64()?,
                    key,
                })
            }),
            position_embedding_type,
        }
    }

    /// Fills the hints this config lacks from `other` (used to merge format metadata).
    pub fn merged_with(mut self, other: ConfigHints) -> ConfigHints {
        macro_rules! fill {
            ($($f:ident),*) => { $( if self.$f.is_none() { self.$f = other.$f; } )* };
        }
        fill!(
            model_type,
            max_positions,
            max_source_positions,
            hidden_size,
            num_heads,
            head_dim,
            rope_theta,
            rope_scaling,
            partial_rotary_factor,
            initializer_range,
            initializer_factor,
            relative_buckets,
            relative_max_distance,
            image_size,
            patch_size,
            window_size,
            pad_token_id,
            position_embedding_type
        );
        self.source = format!("{} + {}", self.source, other.source);
        self
    }

    /// A compact one-line summary of the hints that were found, for terminal output.
    pub fn summary(&self) -> String {
        let mut parts = Vec::new();
        if let Some(m) = &self.model_type {
            parts.push(format!("model_type {m}"));
        }
        if let Some(h) = &self.max_positions {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.max_source_positions {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.hidden_size {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.num_heads {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.rope_theta {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.rope_scaling {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.initializer_range {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.relative_buckets {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.relative_max_distance {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.image_size {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.patch_size {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.window_size {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if let Some(h) = &self.position_embedding_type {
            parts.push(format!("{} {}", h.key, h.value));
        }
        if parts.is_empty() {
            "no position-related settings".to_string()
        } else {
            parts.join(", ")
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    #[test]
    fn reads_the_keys_of_common_families() {
        // Key names as the families' configs spell them (common practice: GPT-2 uses
        // n_positions/n_embd, BERT max_position_embeddings/hidden_size).
        let gpt2 = json!({"model_type": "gpt2", "n_positions": 1024, "n_embd": 768, "n_head": 12, "initializer_range": 0.02});
        let h = ConfigHints::from_json(&gpt2, "config.json");
        assert_eq!(h.max_positions.as_ref().map(|x| x.value), Some(1024));
        assert_eq!(
            h.max_positions.as_ref().map(|x| x.key.as_str()),
            Some("n_positions")
        );
        assert_eq!(h.hidden_size.map(|x| x.value), Some(768));
        assert_eq!(h.initializer_range.map(|x| x.value), Some(0.02));
        let clip = json!({"text_config": {"max_position_embeddings": 77}, "vision_config": {"image_size": 224, "patch_size": 32}});
        let h = ConfigHints::from_json(&clip, "config.json");
        assert_eq!(
            h.max_positions.as_ref().map(|x| x.key.as_str()),
            Some("text_config.max_position_embeddings")
        );
        assert_eq!(h.image_size.map(|x| x.value), Some(224));
    }

    #[test]
    fn wrong_types_are_ignored_not_fatal() {
        let odd =
            json!({"max_position_embeddings": "lots", "rope_scaling": null, "hidden_size": -3});
        let h = ConfigHints::from_json(&odd, "config.json");
        assert!(h.max_positions.is_none());
        assert!(h.rope_scaling.is_none());
        assert!(h.hidden_size.is_none());
    }
}
