//! The `arcwright` binary: parses the command line, then hands over to one command.
//!
//! Exit codes: 0 success, 1 failure while working (I/O, internal), 2 bad input or bad usage.

use arcwright::{cli, commands, server};

use std::process::ExitCode;

/// mimalloc rather than the system allocator: a parse allocates a few hundred small strings and
/// vectors on a parsing thread that the network threads free, and the system allocator's
/// cross-thread frees were the largest cost outside parsing (docs/decisions/allocator-and-huge-pages.md).
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

/// Commands that write to stdout end quietly when the reader goes away (`arcwright … | head`):
/// the default action of SIGPIPE, which Rust's runtime replaces with an error that `println!`
/// turns into a panic. Not for `serve`, where a peer closing a socket must stay an I/O error.
#[cfg(unix)]
fn end_quietly_on_closed_pipe() {
    #[allow(unsafe_code)] // restoring a signal's default action; no handler runs Rust code
    // SAFETY: called once, before any thread is started; SIG_DFL installs no handler.
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
}

/// The tensor library's matrix products split across its own thread pool, sized by
/// RAYON_NUM_THREADS (all cores when unset). arcwright runs its own threads — a parsing pool in
/// the service, data-parallel parts in neural training — and products as small as one sentence's
/// are slower split than whole (measured: an epoch on 800 Turkish sentences took 11.6 s with
/// two-way products and 8.3 s with one-way ones), so products stay on the calling thread unless
/// the variable says otherwise.
fn keep_matrix_products_on_the_calling_thread() {
    if std::env::var_os("RAYON_NUM_THREADS").is_none() {
        #[allow(unsafe_code)] // setting an environment variable
        // SAFETY: called first thing in main, before any thread is started.
        unsafe {
            std::env::set_var("RAYON_NUM_THREADS", "1");
        }
    }
}

fn main() -> ExitCode {
    keep_matrix_products_on_the_calling_thread();
    let matches = <cli::Cli as clap::CommandFactory>::command().get_matches();
    let mut args = match <cli::Cli as clap::FromArgMatches>::from_arg_matches(&matches) {
        Ok(args) => args,
        Err(e) => e.exit(),
    };
    // `parse --model DIR` wins over a store that only the environment names; both on the
    // command line is a contradiction.
    if let (cli::Command::Parse(options), Some(parse)) =
        (&mut args.command, matches.subcommand_matches("parse"))
        && options.model.is_some()
        && options.store.is_some()
    {
        if parse.value_source("store") == Some(clap::parser::ValueSource::EnvVariable) {
            options.store = None;
        } else {
            eprintln!("arcwright: give --model DIR or --store URL --name NAME, not both");
            return ExitCode::from(2);
        }
    }
    #[cfg(unix)]
    if !matches!(args.command, cli::Command::Serve(_)) {
        end_quietly_on_closed_pipe();
    }
    let outcome = match args.command {
        cli::Command::Decode(options) => commands::decode::run(&options),
        cli::Command::Conllu(options) => commands::conllu::run(&options),
        cli::Command::Train(options) => commands::train::run(&options),
        cli::Command::Eval(options) => commands::eval::run(&options),
        cli::Command::Calibrate(options) => commands::train::calibrate(&options),
        cli::Command::Parse(options) => commands::parse::run(&options),
        cli::Command::DemoData(options) => commands::demo::run(&options),
        cli::Command::Store(options) => commands::store::run(&options),
        cli::Command::Health(options) => commands::health::run(&options),
        cli::Command::Probe(options) => {
            for _ in 0..options.runs {
                let run = server::probe::run_once(options.slowed);
                println!("{}", serde_json::to_string(&run).unwrap_or_default());
            }
            Ok(())
        }
        cli::Command::Query(options) => commands::query::run(&options),
        cli::Command::Serve(mut options) => match matches.subcommand_matches("serve") {
            Some(serve_matches) => match options.apply_config_file(serve_matches) {
                Ok(()) => serve(&options),
                Err(message) => Err(commands::Failure::bad_input(message)),
            },
            None => serve(&options),
        },
    };
    match outcome {
        Ok(()) => ExitCode::SUCCESS,
        Err(failure) => {
            eprintln!("arcwright: {}", failure.message);
            ExitCode::from(failure.exit_code)
        }
    }
}

/// `arcwright serve`: validate the configuration, then run the service on a tokio runtime.
fn serve(args: &server::config::ServeArgs) -> Result<(), commands::Failure> {
    let config = args.validate().map_err(commands::Failure::bad_input)?;
    if args.check_config {
        print!("{}", args.to_settings_file());
        if config.admin_token.is_some() {
            println!("# admin token: set (not shown)");
        }
        return Ok(());
    }
    server::init_tracing(args.log_json);
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(commands::Failure::runtime)?;
    runtime.block_on(server::run(config)).map_err(|e| match e {
        server::StartupError::Config(_)
        | server::StartupError::EmptyStore { .. }
        | server::StartupError::Store(arcwright_store::StoreError::NotFound { .. }) => {
            commands::Failure::bad_input(e)
        }
        _ => commands::Failure::runtime(e),
    })
}
