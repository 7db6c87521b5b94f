# One batch = an ordered walk of single points at one basis and SCF family.
# Each finished point is written to the store by pesflow.execution.batch; the done marker
# only tells Snakemake that the job ended.


rule batch:
    input:
        task="tasks/{batch}.json",
    output:
        done="done/{batch}.json",
    log:
        "logs/{batch}.log",
    threads: get_threads()
    params:
        python=PYTHON,
        starter=get_starter_option(),
    resources:
        mem_mb=get_mem_mb(),
        runtime=get_runtime_min(),
    shell:
        'OMP_NUM_THREADS={threads} "{params.python}" -m pesflow.execution.jobstart {params.starter} '
        "{input.task} {output.done} "
        "--threads {threads} --max-memory-mb {resources.mem_mb} > {log} 2>&1"
