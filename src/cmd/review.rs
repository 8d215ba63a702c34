//! `symtrust review`: serve the local review page for labelling sheets and
//! deciding on model proposals.

use crate::context::{Ctx, usage};
use crate::exit;
use clap::Args;
use std::net::IpAddr;
use symtrust_labels::clock::current_user;
use symtrust_review::{ReviewServer, ReviewSettings};

/// Arguments of `symtrust review`.
#[derive(Debug, Args)]
pub struct ReviewArgs {
    /// Port to listen on (0 picks a free one).
    #[arg(long, default_value_t = 8765)]
    pub port: u16,
    /// Address to listen on; anything but loopback also needs --token.
    #[arg(long, value_name = "ADDR", default_value = "127.0.0.1")]
    pub bind: IpAddr,
    /// Access token (at least 16 letters, digits, '-' or '_'); a random one is made when absent.
    #[arg(long, value_name = "T")]
    pub token: Option<String>,
}

/// Starts the server and runs until interrupted.
pub fn run(ctx: &Ctx, args: &ReviewArgs) -> anyhow::Result<u8> {
    if !args.bind.is_loopback() && args.token.is_none() {
        return usage(format!(
            "--bind {} is reachable from other machines: give an access token with --token T as well",
            args.bind
        ));
    }
    if let Some(t) = &args.token
        && let Err(e) = symtrust_review::security::check_token(t)
    {
        return usage(e.to_string());
    }
    let site = ctx.open_site()?;
    let root = site.root.clone();
    let server = ReviewServer::start(
        site,
        ReviewSettings {
            bind: args.bind,
            port: args.port,
            token: args.token.clone(),
            ..ReviewSettings::loopback(&current_user())
        },
    )?;
    if ctx.json {
        ctx.print_json(&serde_json::json!({
            "url": server.url(),
            "addr": server.addr().to_string(),
            "site": root,
        }))?;
    } else {
        // The address is the result of the command: printed even with --quiet.
        println!("{}", server.url());
        ctx.say(format!(
            "reviewing {} — open the address above in a browser on this machine; Ctrl+C stops the server (every change is already saved)",
            root.display()
        ));
    }
    server.wait();
    Ok(exit::OK)
}
