//! The ONNX file format (onnx.ai, open standard): protobuf decoded by prost into tract-onnx's
//! generated ONNX types (no hand-written wire decoding), the facts provenance records, and typed
//! access to node attributes and constant tensors, every failure naming the node and attribute.
//! Shared by `import` (reading a model into our structures) and `model::graph` (evaluating one).

use prost::Message;
pub use tract_onnx::pb;

/// A problem with an ONNX file: where (node, attribute, input or output) and why.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{at}: {message}")]
pub struct OnnxError {
    pub at: String,
    pub message: String,
}

impl OnnxError {
    pub fn new(at: impl Into<String>, message: impl Into<String>) -> Self {
        OnnxError {
            at: at.into(),
            message: message.into(),
        }
    }
}

/// Where the model came from, as the ONNX file says (recorded in the artifact's provenance).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Source {
    /// SHA-256 of the ONNX file's bytes.
    pub sha256: String,
    pub producer_name: String,
    pub producer_version: String,
    pub ir_version: i64,
    /// `(domain, version)`; the empty domain is the default `ai.onnx`.
    pub opsets: Vec<Opset>,
    pub graph_name: String,
}

#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Opset {
    pub domain: String,
    pub version: i64,
}

/// Decodes the file; refuses what cannot be a self-contained model.
pub fn decode(bytes: &[u8]) -> Result<(pb::ModelProto, Source), OnnxError> {
    let model = pb::ModelProto::decode(bytes).map_err(|e| {
        OnnxError::new(
            "file",
            format!("is not an ONNX model (protobuf decoding failed: {e})"),
        )
    })?;
    let Some(graph) = &model.graph else {
        return Err(OnnxError::new("file", "holds no graph"));
    };
    if graph.node.is_empty() {
        return Err(OnnxError::new("graph", "has no nodes"));
    }
    let source = Source {
        sha256: crate::artifact::sha256_hex(bytes),
        producer_name: model.producer_name.clone(),
        producer_version: model.producer_version.clone(),
        ir_version: model.ir_version,
        opsets: (model.opset_import.iter())
            .map(|o| Opset {
                domain: o.domain.clone(),
                version: o.version,
            })
            .collect(),
        graph_name: graph.name.clone(),
    };
    Ok((model, source))
}

/// How a node is named in messages: its name (if any) and operator.
pub fn node_label(node: &pb::NodeProto) -> String {
    if node.name.is_empty() {
        format!("node {}", node.op_type)
    } else {
        format!("node \"{}\" ({})", node.name, node.op_type)
    }
}

/// A constant tensor's values as float64, with its shape.
pub fn tensor_values(t: &pb::TensorProto, at: &str) -> Result<(Vec<i64>, Vec<f64>), OnnxError> {
    use pb::tensor_proto::DataType;
    if !t.external_data.is_empty() || t.data_location == Some(1) {
        return Err(OnnxError::new(
            at,
            "keeps its data in an external file; export the model with its data inside",
        ));
    }
    let raw = &t.raw_data;
    let values: Vec<f64> = match DataType::try_from(t.data_type) {
        Ok(DataType::Float) if !raw.is_empty() => (raw.chunks_exact(4))
            .map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]]) as f64)
            .collect(),
        Ok(DataType::Float) => t.float_data.iter().map(|&v| v as f64).collect(),
        Ok(DataType::Double) if !raw.is_empty() => (raw.chunks_exact(8))
            .map(|b| f64::from_le_bytes(b.try_into().unwrap_or([0; 8])))
            .collect(),
        Ok(DataType::Double) => t.double_data.clone(),
        Ok(DataType::Int64) if !raw.is_empty() => (raw.chunks_exact(8))
            .map(|b| i64::from_le_bytes(b.try_into().unwrap_or([0; 8])) as f64)
            .collect(),
        Ok(DataType::Int64) => t.int64_data.iter().map(|&v| v as f64).collect(),
        _ => {
            return Err(OnnxError::new(
                at,
                format!(
                    "holds a tensor of data type {}; only float, double and int64 are read",
                    t.data_type
                ),
            ))
        }
    };
    let count: i64 = t.dims.iter().product();
    if t.dims.iter().any(|&d| d < 0) || count as usize != values.len() {
        return Err(OnnxError::new(
            at,
            format!("tensor of shape {:?} holds {} values", t.dims, values.len()),
        ));
    }
    Ok((t.dims.clone(), values))
}

/// Typed access to one node's attributes.
pub struct Attrs<'a> {
    node: &'a pb::NodeProto,
    pub at: String,
}

impl<'a> Attrs<'a> {
    pub fn new(node: &'a pb::NodeProto) -> Self {
        Attrs {
            node,
            at: node_label(node),
        }
    }

    fn get(&self, name: &str) -> Option<&'a pb::AttributeProto> {
        self.node.attribute.iter().find(|a| a.name == name)
    }

    /// An error at attribute `name` of this node.
    pub fn err(&self, name: &str, message: impl Into<String>) -> OnnxError {
        OnnxError::new(format!("{}, attribute {name}", self.at), message)
    }

    /// Refuses attributes this reader does not know: they would change what the node computes.
    pub fn only(&self, known: &[&str]) -> Result<(), OnnxError> {
        for a in &self.node.attribute {
            if !known.contains(&a.name.as_str()) {
                return Err(self.err(
                    &a.name,
                    "is not an attribute plumbline reads for this operator; it may change what the node computes",
                ));
            }
            if !a.ref_attr_name.is_empty() {
                return Err(self.err(&a.name, "refers to a function's attribute"));
            }
        }
        Ok(())
    }

    pub fn has(&self, name: &str) -> bool {
        self.get(name).is_some()
    }

    pub fn ints(&self, name: &str) -> Vec<i64> {
        self.get(name).map(|a| a.ints.clone()).unwrap_or_default()
    }

    pub fn int(&self, name: &str, default: i64) -> i64 {
        self.get(name).map_or(default, |a| a.i)
    }

    pub fn string(&self, name: &str, default: &str) -> Result<String, OnnxError> {
        match self.get(name) {
            None => Ok(default.to_string()),
            Some(a) => String::from_utf8(a.s.clone()).map_err(|_| self.err(name, "is not UTF-8")),
        }
    }

    pub fn strings(&self, name: &str) -> Result<Vec<String>, OnnxError> {
        let Some(a) = self.get(name) else {
            return Ok(Vec::new());
        };
        (a.strings.iter())
            .map(|s| String::from_utf8(s.clone()).map_err(|_| self.err(name, "is not UTF-8")))
            .collect()
    }

    /// Real values from `name` (float32 list) or `name_as_tensor` (float or double tensor), as
    /// float64; `None` when neither is present. Both at once is refused.
    pub fn reals(&self, name: &str) -> Result<Option<Vec<f64>>, OnnxError> {
        let tensor_name = format!("{name}_as_tensor");
        match (self.get(name), self.get(&tensor_name)) {
            (Some(_), Some(_)) => {
                Err(self.err(name, format!("is given twice, as {name} and {tensor_name}")))
            }
            (Some(a), None) => Ok(Some(a.floats.iter().map(|&v| v as f64).collect())),
            (None, Some(a)) => {
                let t = (a.t.as_ref()).ok_or_else(|| self.err(&tensor_name, "holds no tensor"))?;
                let at = format!("{}, attribute {tensor_name}", self.at);
                Ok(Some(tensor_values(t, &at)?.1))
            }
            (None, None) => Ok(None),
        }
    }
}

/// Binary models only, labelled 0 and 1 (1 = defaulted), so column 1 is the default probability.
pub fn check_binary_labels(a: &Attrs) -> Result<(), OnnxError> {
    let ints = a.ints("classlabels_int64s");
    let ints = if ints.is_empty() {
        a.ints("classlabels_ints")
    } else {
        ints
    };
    let strings = a.strings("classlabels_strings")?;
    let (name, labels): (&str, Vec<String>) = if !strings.is_empty() {
        ("classlabels_strings", strings)
    } else if a.has("classlabels_ints") {
        (
            "classlabels_ints",
            ints.iter().map(|i| i.to_string()).collect(),
        )
    } else {
        (
            "classlabels_int64s",
            ints.iter().map(|i| i.to_string()).collect(),
        )
    };
    match labels.len() {
        2 if labels == ["0", "1"] => Ok(()),
        2 => Err(a.err(
            name,
            format!("labels {labels:?}: plumbline reads models whose classes are 0 and 1 (1 = defaulted); relabel the outcome before training"),
        )),
        n => Err(a.err(
            name,
            format!("{n} classes: plumbline reads binary default models only (multiclass is refused)"),
        )),
    }
}
