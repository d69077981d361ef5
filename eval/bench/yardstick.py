"""Time llama.cpp (through the llama-cpp-python package) on the same GGUF
file and the same prompt token ids as `cargo bench --bench generate`, so the
two can be set side by side in one run. Used only as a yardstick.

    python yardstick.py MODEL.gguf IDS.json N_GEN THREADS

Prints one JSON object: prompt_tokens, prompt_tokens_per_s,
generated_tokens, generated_tokens_per_s, load_s.
"""
import json
import sys
import time

from llama_cpp import Llama

path, ids_file, n_gen, threads = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
ids = json.load(open(ids_file))
t0 = time.perf_counter()
llm = Llama(model_path=path, n_ctx=4096, n_batch=512, n_threads=threads,
            n_threads_batch=threads, verbose=False)
load_s = time.perf_counter() - t0
best_prompt, best_gen = 0.0, 0.0
for _ in range(3):
    llm.reset()
    t0 = time.perf_counter()
    llm.eval(ids)
    prompt_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    for _ in range(n_gen):
        tok = llm.sample(temp=0.0, top_k=1)
        llm.eval([tok])
    gen_s = time.perf_counter() - t0
    best_prompt = max(best_prompt, len(ids) / prompt_s)
    best_gen = max(best_gen, n_gen / gen_s)
print(json.dumps({
    "prompt_tokens": len(ids),
    "prompt_tokens_per_s": best_prompt,
    "generated_tokens": n_gen,
    "generated_tokens_per_s": best_gen,
    "load_s": load_s,
}))
