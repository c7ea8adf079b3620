using Bitbudget.Service.Problems;
using Bitbudget.Service.Store;
using Microsoft.AspNetCore.Http.HttpResults;

namespace Bitbudget.Service.Hosting;

/// <summary>
/// While the data folder is known to be unwritable (a probe or a write found it so), a request that would
/// write (POST, PUT, PATCH, DELETE) is answered 503 store-unavailable before it reads its body, after the
/// API key check. Each refusal probes again, so the first write after the disk is fixed goes through.
/// </summary>
internal static class StoreWriteGate
{
    public static WebApplication UseStoreWriteGate(this WebApplication app)
    {
        app.Use(async (context, next) =>
        {
            var method = context.Request.Method;
            var writes = HttpMethods.IsPost(method) || HttpMethods.IsPut(method) || HttpMethods.IsPatch(method) || HttpMethods.IsDelete(method);
            if (writes && context.RequestServices.GetRequiredService<StoreProbe>() is { KnownUnwritable: true } probe && probe.Probe() is { } fault)
            {
                StoreUnavailableResponse.Prepare(context);
                var problem = StoreUnavailableResponse.Problem(fault);
                problem.Instance = context.Request.Path;
                await TypedResults.Problem(problem).ExecuteAsync(context).ConfigureAwait(false);
                return;
            }

            await next(context).ConfigureAwait(false);
        });
        return app;
    }
}
