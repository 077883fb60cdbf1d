//! PLACEHOLDER until the watcher lands (replaced at merge).
#[derive(Debug, Clone, serde::Deserialize)]
pub struct WatchFolder {
    pub path: std::path::PathBuf,
    pub profile: String,
    pub site: Option<String>,
}
impl WatchFolder {
    pub fn validate(&self) -> Result<(), String> {
        Ok(())
    }
}
