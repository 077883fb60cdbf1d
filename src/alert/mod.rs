//! PLACEHOLDER until alerts land (replaced at merge).
#[derive(Debug, Clone, Default, serde::Deserialize)]
pub struct AlertRules {}
#[derive(Debug, Clone, Default, serde::Deserialize)]
pub struct MailConfig {}
