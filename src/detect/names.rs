//! Reading a tensor's name as evidence: the name is split into tokens (on `.`, `/`, `_`,
//! `-`, `:`, camelCase and letter/digit boundaries) and the tokens are scored, instead of
//! matching a closed list of whole names.
//!
//! - A *position word* (position, positional, pos, posn, ...) together with a *table word*
//!   (embedding, embed, emb, embd, encoding, enc, table, weight, ...) is a strong hint of
//!   a position table; glued forms (`wpe`, `posembed`) count as both.
//! - A position word alone (`decoder.positions`) is a weak hint: shape or content must
//!   agree before it is a table.
//! - *Other-role words* (token, word, type, segment, norm, attention, mlp, projection,
//!   class token, output head, ...) say the tensor is something else, whatever else the
//!   name or the content says.
//! - Optimizer state (Adam moments, momentum buffers, anything under an optimizer subtree
//!   of a training checkpoint) is never a table: it has the shape of the parameter it
//!   belongs to, and often its smoothness too.

/// The tokens of a name, lower case, in order.
pub fn tokens(name: &str) -> Vec<String> {
    let mut out = Vec::new();
    for part in name.split(['.', '/', '_', '-', ':', ' ']) {
        let chars: Vec<char> = part.chars().collect();
        let mut cur = String::new();
        for (i, &c) in chars.iter().enumerate() {
            let prev = i.checked_sub(1).map(|j| chars[j]);
            let next = chars.get(i + 1).copied();
            let boundary = match prev {
                None => false,
                Some(p) => {
                    (p.is_ascii_lowercase() && c.is_ascii_uppercase())
                        || (p.is_ascii_uppercase()
                            && c.is_ascii_uppercase()
                            && next.is_some_and(|n| n.is_ascii_lowercase()))
                        || (p.is_ascii_digit() != c.is_ascii_digit())
                }
            };
            if boundary && !cur.is_empty() {
                out.push(std::mem::take(&mut cur).to_ascii_lowercase());
            }
            cur.push(c);
        }
        if !cur.is_empty() {
            out.push(cur.to_ascii_lowercase());
        }
    }
    out
}

/// Words that say "position".
const POSITION: [&str; 5] = ["position", "positions", "positional", "pos", "posn"];

/// Glued words that say "position table" by themselves.
const POSITION_TABLE: [&str; 7] = [
    "wpe",
    "posembed",
    "posemb",
    "posenc",
    "pe",
    "sinusoid",
    "sinusoidal",
];

/// Words that say "table of vectors".
const TABLE: [&str; 15] = [
    "embedding",
    "embeddings",
    "embed",
    "embeds",
    "emb",
    "embd",
    "encoding",
    "encodings",
    "enc",
    "table",
    "weight",
    "weights",
    "vectors",
    "codes",
    "param",
];

/// Words that give the tensor another role, whatever else the name says.
const OTHER_ROLE: [&str; 45] = [
    "token",
    "tokens",
    "tok",
    "word",
    "words",
    "wte",
    "vocab",
    "type",
    "types",
    "segment",
    "norm",
    "layernorm",
    "rmsnorm",
    "ln",
    "lm",
    "head",
    "cls",
    "class",
    "dist",
    "reg",
    "register",
    "mask",
    "classifier",
    "output",
    "query",
    "key",
    "value",
    "attn",
    "attention",
    "mlp",
    "ffn",
    "fc",
    "proj",
    "projection",
    "dense",
    "intermediate",
    "gate",
    "conv",
    "patch",
    "lora",
    "scale",
    "gamma",
    "beta",
    "bias",
    "ids",
];

/// Path components and name endings of optimizer state.
const OPTIMIZER_PARTS: [&str; 8] = [
    "optimizer",
    "optimizers",
    "optimizer_states",
    "optimizer_state",
    "optimizer_state_dict",
    "optim",
    "opt_state",
    "optim_state",
];
const OPTIMIZER_ENDINGS: [&str; 8] = [
    "exp_avg",
    "exp_avg_sq",
    "max_exp_avg_sq",
    "momentum_buffer",
    "square_avg",
    "acc_delta",
    "exp_inf",
    "ax",
];

/// Is the tensor optimizer state (a moment or buffer of some parameter)? Names the
/// component that says so.
pub fn optimizer_state(name: &str) -> Option<String> {
    let lower = name.to_ascii_lowercase();
    let parts: Vec<&str> = lower.split(['.', '/']).collect();
    if let Some(p) = parts.iter().find(|p| OPTIMIZER_PARTS.contains(p)) {
        return Some(p.to_string());
    }
    let last = parts.last().copied().unwrap_or("");
    // `ax` (averaged SGD) only as a whole last component under a numbered state entry.
    OPTIMIZER_ENDINGS
        .iter()
        .find(|e| last == **e && (**e != "ax" || parts.contains(&"state")))
        .map(|e| e.to_string())
}

/// What the name says about the tensor.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum NameHint {
    /// Position word and table word: `because` names them.
    Strong(String),
    /// A position word alone.
    Weak(String),
    /// A word of another role: never a table.
    Other(String),
    /// Nothing either way.
    None,
}

/// Scores the name of a (float) tensor.
pub fn score(name: &str) -> NameHint {
    let toks = tokens(node_output_stem(name));
    if let Some(o) = toks.iter().find(|t| OTHER_ROLE.contains(&t.as_str())) {
        return NameHint::Other(o.clone());
    }
    if let Some(g) = toks.iter().find(|t| POSITION_TABLE.contains(&t.as_str())) {
        return NameHint::Strong(format!("`{g}`"));
    }
    let Some(p) = toks.iter().position(|t| POSITION.contains(&t.as_str())) else {
        return NameHint::None;
    };
    // The table word nearest to the position word; `weight` only when there is no other;
    // on a tie the later word (`embed.position_encodings` -> `encodings`).
    let table = toks
        .iter()
        .enumerate()
        .filter(|(_, t)| TABLE.contains(&t.as_str()))
        .min_by_key(|(i, t)| (t.as_str() == "weight", i.abs_diff(p), usize::MAX - i));
    match table {
        Some((_, t)) => NameHint::Strong(format!("`{}` + `{t}`", toks[p])),
        None => NameHint::Weak(format!("`{}`", toks[p])),
    }
}

/// ONNX exporters name a Constant node's tensor after the node's output
/// (`/encoder/Constant_output_0`): that `output` is the graph's, not an output head's.
/// Returns the name without that suffix.
fn node_output_stem(name: &str) -> &str {
    match name.rsplit_once("_output_") {
        Some((stem, n)) if !n.is_empty() && n.bytes().all(|b| b.is_ascii_digit()) => stem,
        _ => name,
    }
}

/// Does the name say "position ids" (for integer buffers)?
pub fn is_position_ids(name: &str) -> bool {
    let toks = tokens(name);
    toks.iter().any(|t| POSITION.contains(&t.as_str()))
        && toks.iter().any(|t| t == "ids" || t == "id")
}

/// Stored rotary frequencies: `inv_freq`, GGUF `rope_freqs`, `rope_factors`, ...
pub fn is_rotary(name: &str) -> bool {
    let toks = tokens(name);
    let has = |w: &[&str]| toks.iter().any(|t| w.contains(&t.as_str()));
    (has(&["inv"]) && has(&["freq", "freqs"]))
        || (has(&["rope", "rotary"]) && has(&["freq", "freqs", "factors", "factor"]))
}

/// Relative-position bias tables: T5/MPNet `relative_attention_bias`, windowed vision
/// `relative_position_bias_table`, `rel_pos_bias`, GGUF `attn_rel_b`.
pub fn is_relative(name: &str) -> bool {
    let toks = tokens(name);
    let has = |w: &[&str]| toks.iter().any(|t| w.contains(&t.as_str()));
    has(&["relative", "rel"]) && has(&["bias", "b"]) && !has(&["index"])
}

/// Vision-model words (they allow a square row count to be read as a grid).
pub fn is_vision(name: &str) -> bool {
    let toks = tokens(name);
    toks.iter().any(|t| {
        [
            "vision", "visual", "patch", "vit", "image", "img", "v", "pixel",
        ]
        .contains(&t.as_str())
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_split_on_separators_case_and_digits() {
        assert_eq!(
            tokens("bert.embeddings.LayerNorm.weight"),
            ["bert", "embeddings", "layer", "norm", "weight"]
        );
        assert_eq!(tokens("posEmbedding-2"), ["pos", "embedding", "2"]);
        assert_eq!(tokens("blk.0.ffn_norm1"), ["blk", "0", "ffn", "norm", "1"]);
        assert_eq!(tokens("HTMLParser"), ["html", "parser"]);
    }

    #[test]
    fn onnx_node_outputs_are_not_output_heads() {
        // ONNX exporters name Constant node tensors `<path>/<Op>_output_<n>` (common
        // practice of the torch.onnx exporter, from memory); the output head stays vetoed.
        assert!(matches!(
            score("/encoder/Constant_output_0"),
            NameHint::None
        ));
        assert!(matches!(score("output.weight"), NameHint::Other(_)));
        assert!(matches!(score("lm_head_output_x"), NameHint::Other(_)));
    }

    #[test]
    fn position_tables_of_many_namings_score_strong() {
        // Names as common model code writes them (common practice, from memory): GPT-2
        // `wpe`, BERT, BART/Whisper-HF `embed_positions`, openai-Whisper, ViT (Flax)
        // `posembed_input`, Swin `absolute_pos_embed`, GGUF `position_embd` (gguf package,
        // gguf.constants.TENSOR_NAMES[MODEL_TENSOR.POS_EMBD]), converted speech models
        // `position_encodings`, a NumPy dump named after its file stem.
        for n in [
            "transformer.wpe.weight",
            "bert.embeddings.position_embeddings.weight",
            "model.decoder.embed_positions.weight",
            "encoder.positional_embedding",
            "Transformer/posembed_input/pos_embedding",
            "absolute_pos_embed",
            "position_embd.weight",
            "v.position_embd.weight",
            "encoder.embed.position_encodings",
            "position_table",
            "pos_encoder.pe",
        ] {
            assert!(
                matches!(score(n), NameHint::Strong(_)),
                "{n}: {:?}",
                score(n)
            );
        }
    }

    #[test]
    fn weights_of_other_roles_are_never_tables() {
        for n in [
            "bert.embeddings.token_type_embeddings.weight",
            "bert.embeddings.word_embeddings.weight",
            "transformer.wte.weight",
            "token_embd.weight",
            "bert.embeddings.LayerNorm.weight",
            "a.position_embd_norm.weight",
            "lm_head.weight",
            "encoder.layer.0.attention.self.query.weight",
            "blk.0.attn_q.weight",
            "deberta.encoder.layer.0.attention.self.pos_proj.weight",
            "vit.embeddings.cls_token",
            "output.weight",
        ] {
            assert!(
                matches!(score(n), NameHint::Other(_)),
                "{n}: {:?}",
                score(n)
            );
        }
        assert_eq!(
            score("encoder.layer.0.intermediate.dense.weight").clone(),
            { NameHint::Other("intermediate".into()) }
        );
    }

    #[test]
    fn optimizer_state_is_recognised() {
        assert!(optimizer_state("optimizer_states.0.state.3.exp_avg_sq").is_some());
        assert!(optimizer_state("optimizer.state.1.exp_avg").is_some());
        assert!(optimizer_state("state.7.momentum_buffer").is_some());
        assert!(optimizer_state("model.embeddings.position_embeddings.weight").is_none());
    }

    #[test]
    fn other_kinds_by_tokens() {
        assert!(is_rotary("model.layers.0.self_attn.rotary_emb.inv_freq"));
        assert!(is_rotary("rope_freqs.weight"));
        assert!(!is_rotary("transformer.wpe.weight"));
        assert!(is_relative(
            "encoder.block.0.layer.0.SelfAttention.relative_attention_bias.weight"
        ));
        assert!(is_relative("enc.blk.0.attn_rel_b.weight"));
        assert!(is_relative(
            "layers.0.blocks.0.attn.relative_position_bias_table"
        ));
        assert!(!is_relative(
            "layers.0.blocks.0.attn.relative_position_index"
        ));
        assert!(is_position_ids("embeddings.position_ids"));
    }
}
