//! The loaded models: one champion and any number of named others, swapped atomically on
//! reload (requests in flight keep the set they started with).

use crate::decide::ModelSelector;
use crate::LoadedModel;
use std::path::PathBuf;
use std::sync::{Arc, RwLock};

/// Why a set of model files does not load; the current set stays in service on a reload.
#[derive(Debug, thiserror::Error)]
pub enum ModelSetError {
    #[error("no model files given")]
    NoModels,
    #[error("model {}: {source}", path.display())]
    Load {
        path: PathBuf,
        source: crate::ArtifactError,
    },
    #[error("model {}: {model_id} version {version} is loaded twice", path.display())]
    LoadedTwice {
        path: PathBuf,
        model_id: String,
        version: String,
    },
}

/// An immutable set of loaded models.
#[derive(Debug)]
pub struct ModelSet {
    /// The first file given; requests without a model selector use it.
    pub champion: Arc<LoadedModel>,
    pub models: Vec<Arc<LoadedModel>>,
}

impl ModelSet {
    /// Loads and validates every file; any failure names the file and the JSON path.
    pub fn load(paths: &[PathBuf]) -> Result<ModelSet, ModelSetError> {
        if paths.is_empty() {
            return Err(ModelSetError::NoModels);
        }
        let mut models: Vec<Arc<LoadedModel>> = Vec::new();
        for p in paths {
            let m = LoadedModel::from_path(p).map_err(|source| ModelSetError::Load {
                path: p.clone(),
                source,
            })?;
            if models.iter().any(|x| {
                x.identity.model_id == m.identity.model_id
                    && x.identity.version == m.identity.version
            }) {
                return Err(ModelSetError::LoadedTwice {
                    path: p.clone(),
                    model_id: m.identity.model_id.clone(),
                    version: m.identity.version.clone(),
                });
            }
            models.push(Arc::new(m));
        }
        Ok(ModelSet {
            champion: models[0].clone(),
            models,
        })
    }

    /// The champion, or the first-listed model matching the selector.
    pub fn select(&self, selector: Option<&ModelSelector>) -> Option<Arc<LoadedModel>> {
        match selector {
            None => Some(self.champion.clone()),
            Some(s) => self.models.iter().find(|m| s.matches(m)).cloned(),
        }
    }
}

/// The current set and the files it came from.
pub struct Registry {
    paths: Vec<PathBuf>,
    current: RwLock<Arc<ModelSet>>,
    /// Held while a reload reads and swaps.
    reloading: std::sync::Mutex<()>,
}

impl Registry {
    pub fn new(paths: Vec<PathBuf>) -> Result<Registry, ModelSetError> {
        let set = ModelSet::load(&paths)?;
        Ok(Registry {
            reloading: std::sync::Mutex::new(()),
            paths,
            current: RwLock::new(Arc::new(set)),
        })
    }

    pub fn current(&self) -> Arc<ModelSet> {
        self.current
            .read()
            .unwrap_or_else(|e| e.into_inner())
            .clone()
    }

    /// Loads the files again; on success swaps the new set in, on failure keeps the old one.
    pub fn reload(&self) -> Result<Arc<ModelSet>, ModelSetError> {
        // One reload at a time: two racing would each validate, and the slower could swap in
        // files older than the faster one read.
        let _one = self.reloading.lock().unwrap_or_else(|e| e.into_inner());
        let set = Arc::new(ModelSet::load(&self.paths)?);
        *self.current.write().unwrap_or_else(|e| e.into_inner()) = set.clone();
        Ok(set)
    }
}
