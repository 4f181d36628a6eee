# One job per (run, c) with every random start inside; the file holds the consensus of the
# starts at the optimum and its evidence. keep_scan_files: false removes it once read.
# Its one input holds the prepared matrix and the chosen m (one file, not two: a large grid
# has 14,400 scan jobs, and each input file is work for Snakemake when it plans).
# One thread by default: a run has a scan job per c, so jobs side by side fill the cores, and
# for small matrices a second thread would mostly wait for the job's start-up.


rule scan:
    input:
        scan_input=run_path("{run}", "prepared/scan_input.npz"),
    output:
        scan=(
            run_path("{run}", "scan/c{c}.npz")
            if SETTINGS["keep_scan_files"]
            else temp(run_path("{run}", "scan/c{c}.npz"))
        ),
    params:
        settings=get_start_settings,
        seed=SETTINGS["seed"],
    log:
        "logs/{run}/scan_c{c}.log",
    benchmark:
        "benchmarks/{run}/scan_c{c}.tsv"
    priority: SCAN_PRIORITY
    threads: PLAN.threads("scan")
    resources:
        mem_mb=resource("scan", "mem_mb"),
        runtime=resource("scan", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_scan.py"
