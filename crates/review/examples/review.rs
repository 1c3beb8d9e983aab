//! Build the review site of a run, or apply a corrections file, without the CLI:
//! `cargo run -p tendline-review --example review -- site <RUN> <OUT>` or
//! `... -- apply <RUN> <CORRECTIONS> <WHO>`.

fn main() {
    let a: Vec<String> = std::env::args().skip(1).collect();
    let r = match a.iter().map(String::as_str).collect::<Vec<_>>().as_slice() {
        ["site", run, out] => {
            tendline_review::build_site(run.as_ref(), out.as_ref()).map(|s| format!("{s:#?}"))
        }
        ["apply", run, c, who] => {
            tendline_review::apply_corrections(run.as_ref(), c.as_ref(), Some(who))
                .map(|s| format!("{s:#?}"))
        }
        _ => {
            eprintln!("usage: review site <RUN> <OUT> | review apply <RUN> <CORRECTIONS> <WHO>");
            std::process::exit(2);
        }
    };
    match r {
        Ok(s) => println!("{s}"),
        Err(e) => {
            eprintln!("error: {e}");
            std::process::exit(1);
        }
    }
}
