using System.Text.Json.Nodes;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Searches;
using Microsoft.AspNetCore.OpenApi;
using Microsoft.OpenApi;

namespace Bitbudget.Service.Api;

/// <summary>
/// What the generated OpenAPI document cannot know from the handlers alone: the Bearer scheme and which routes
/// need it (with their 401), numbers as numbers (the API writes a non-finite one as "Infinity", "-Infinity" or
/// "NaN"), the accepted values of each choice in a search request, every problem as application/problem+json,
/// and the headers and paging parameters the handlers read themselves.
/// </summary>
internal static class OpenApiDocumentation
{
    private const string Bearer = "bearer";

    /// <summary>Routes that answer without a key (AllowAnonymous).</summary>
    private static readonly string[] Anonymous = ["/healthz", "/metrics"];

    /// <summary>The accepted spellings of each choice of a search request (any case is accepted; these are echoed).</summary>
    private static readonly Dictionary<string, IEnumerable<string>> Choices = new(StringComparer.Ordinal)
    {
        ["method"] = SearchVocabulary.Methods.Keys,
        ["scheme"] = SearchVocabulary.Schemes.Keys,
        ["granularity"] = SearchVocabulary.Granularities.Keys,
        ["clip"] = SearchVocabulary.Clips.Keys,
        ["metricSpace"] = SearchVocabulary.MetricSpaces.Keys,
        ["storage"] = SearchVocabulary.Storages.Keys,
        ["metric"] = SearchVocabulary.Metrics.Keys,
    };

    /// <summary>What the trial page's counts and a trial's origin mean (the generator does not read doc comments).</summary>
    private static readonly Dictionary<(Type, string), string> Meanings = new()
    {
        [(typeof(TrialPageResponse), "total")] = "Every trial the search's result rests on, measured or reused; the manifest's trials once the search is done.",
        [(typeof(TrialPageResponse), "measured")] = "Trials this search measured itself: what its sweep and validations cost.",
        [(typeof(TrialPageResponse), "reused")] = "Sensitivity trials taken from earlier searches on the same model, dataset and settings instead of measured again.",
        [(typeof(Bitbudget.Search.Planning.TrialRecord), "reusedFrom")] = "The id of the earlier search that measured this trial (same model, dataset and settings); null for a trial this search measured.",
    };

    public static IServiceCollection AddBitbudgetOpenApi(this IServiceCollection services) =>
        services.AddOpenApi(options =>
        {
            options.AddSchemaTransformer((schema, context, _) =>
            {
                TypeNumbers(schema, context.JsonTypeInfo.Type);
                if (context.JsonPropertyInfo is { } property
                    && (property.DeclaringType == typeof(SearchRequest) || property.DeclaringType == typeof(SearchSpec) || property.DeclaringType == typeof(BudgetSpec))
                    && Choices.TryGetValue(property.Name, out var values))
                {
                    var accepted = values.Select(v => (JsonNode)JsonValue.Create(v)!).ToList();
                    if (schema.Type?.HasFlag(JsonSchemaType.Null) == true)
                    {
                        accepted.Add(null!); // JSON null: the field may be sent as null for its default
                    }

                    schema.Enum = accepted;
                    schema.Description = (schema.Description is null ? string.Empty : schema.Description + " ") + "Accepted in any case; answers spell it as listed.";
                }

                if (context.JsonPropertyInfo is { } described && Meanings.TryGetValue((described.DeclaringType, described.Name), out var meaning))
                {
                    schema.Description = meaning;
                }

                // The pair count's range, as SearchRequestValidator checks it.
                if (context.JsonPropertyInfo is { Name: "pairs" } pairs
                    && (pairs.DeclaringType == typeof(SearchRequest) || pairs.DeclaringType == typeof(SearchSpec)))
                {
                    schema.Minimum = "0";
                    schema.Maximum = SearchSettings.MaxPairs.ToString(System.Globalization.CultureInfo.InvariantCulture);
                }

                // A size budget ({"bytes": N} or {"averageBits": B}) needs no metric; an error budget's is checked by the service.
                if (context.JsonTypeInfo.Type == typeof(BudgetSpec))
                {
                    schema.Required?.Remove("metric");
                }

                return Task.CompletedTask;
            });
            options.AddDocumentTransformer((document, _, _) =>
            {
                Describe(document);
                return Task.CompletedTask;
            });
        });

    /// <summary>
    /// double: a JSON number or one of the three named literals the API writes for non-finite values; integers: integer.
    /// The generator, seeing the named-literal number handling, would otherwise allow any string.
    /// </summary>
    private static void TypeNumbers(OpenApiSchema schema, Type clrType)
    {
        var type = Nullable.GetUnderlyingType(clrType) ?? clrType;
        var nullable = Nullable.GetUnderlyingType(clrType) is not null ? JsonSchemaType.Null : 0;
        if (type == typeof(double) || type == typeof(float))
        {
            schema.Type = null;
            schema.Pattern = null;
            schema.AnyOf =
            [
                new OpenApiSchema { Type = JsonSchemaType.Number | nullable, Format = type == typeof(float) ? "float" : "double" },
                new OpenApiSchema { Type = JsonSchemaType.String, Enum = [JsonValue.Create("Infinity"), JsonValue.Create("-Infinity"), JsonValue.Create("NaN")] },
            ];
        }
        else if (type == typeof(int) || type == typeof(long))
        {
            schema.Type = JsonSchemaType.Integer | nullable;
            schema.Pattern = null;
            schema.Format = type == typeof(int) ? "int32" : "int64";
        }
    }

    private static void Describe(OpenApiDocument document)
    {
        document.Components ??= new OpenApiComponents();

        // A shared enum component (an engine enum in wire spelling) is referenced from a oneOf that already has a
        // null branch; a null inside the enum too would make null match both branches, which oneOf refuses.
        foreach (var schema in document.Components.Schemas?.Values.OfType<OpenApiSchema>() ?? [])
        {
            if (schema.Enum is { } values && values.Any(v => v is null))
            {
                schema.Enum = values.Where(v => v is not null).ToList();
            }
        }

        document.Components.SecuritySchemes ??= new Dictionary<string, IOpenApiSecurityScheme>();
        document.Components.SecuritySchemes[Bearer] = new OpenApiSecurityScheme
        {
            Type = SecuritySchemeType.Http,
            Scheme = Bearer,
            Description = "An API key from BITBUDGET_API_KEYS (or the generated ./data/api-key), sent as Authorization: Bearer <key>.",
        };

        foreach (var (path, item) in document.Paths)
        {
            foreach (var (method, operation) in item.Operations ?? new Dictionary<HttpMethod, OpenApiOperation>())
            {
                operation.Responses ??= new OpenApiResponses();
                if (!Anonymous.Contains(path) && !path.StartsWith("/openapi", StringComparison.Ordinal))
                {
                    operation.Security = [new OpenApiSecurityRequirement { [new OpenApiSecuritySchemeReference(Bearer, document)] = [] }];
                    AddProblem(document, operation, 401, "The Authorization header is missing or holds no known API key (unauthorized).");
                }

                if (method != HttpMethod.Get)
                {
                    AddProblem(document, operation, 503, "The data folder cannot be written (store-unavailable); nothing was stored. Retry after Retry-After seconds.");
                }

                if (method == HttpMethod.Post)
                {
                    AddProblem(document, operation, 400, "The request is invalid (invalid-request); errors names each field.");
                    AddProblem(document, operation, 415, "The body has another content type than the route takes (unsupported-media-type).");
                }

                if (path.Contains("{id}", StringComparison.Ordinal))
                {
                    AddProblem(document, operation, 404, "Nothing has this id (not-found).");
                }

                Parameters(path, method, operation);
                Artifacts(path, operation);
                foreach (var (status, response) in operation.Responses)
                {
                    if (status[0] is '4' or '5' && response is OpenApiResponse problem)
                    {
                        problem.Content = new Dictionary<string, OpenApiMediaType> { ["application/problem+json"] = new() { Schema = new OpenApiSchemaReference("ProblemDetails", document) } };
                    }
                }
            }
        }
    }

    private static void AddProblem(OpenApiDocument document, OpenApiOperation operation, int status, string description)
    {
        operation.Responses!.TryAdd(
            status.ToString(System.Globalization.CultureInfo.InvariantCulture),
            new OpenApiResponse
            {
                Description = description,
                Content = new Dictionary<string, OpenApiMediaType> { ["application/problem+json"] = new() { Schema = new OpenApiSchemaReference("ProblemDetails", document) } },
            });
    }

    private static void Parameters(string path, HttpMethod method, OpenApiOperation operation)
    {
        operation.Parameters ??= [];
        if (path == "/v1/searches" && method == HttpMethod.Post)
        {
            operation.Parameters.Add(new OpenApiParameter
            {
                Name = "Idempotency-Key",
                In = ParameterLocation.Header,
                Description = "Up to 200 characters. A retried POST with the same key and body returns the search the first one started; the same key with another body is 422 idempotency-key-reused.",
                Schema = new OpenApiSchema { Type = JsonSchemaType.String, MaxLength = 200 },
            });
            operation.Responses!.TryAdd("422", new OpenApiResponse { Description = "The model, dataset and request cannot work together, or the Idempotency-Key was used for another request." });
        }

        foreach (var parameter in operation.Parameters.OfType<OpenApiParameter>())
        {
            parameter.Description ??= (path, parameter.Name) switch
            {
                ("/v1/searches", "limit") => "How many searches to list, 1 to 500 (default 50), newest first.",
                (_, "limit") => "Trials per page, 1 to 1000 (default 100).",
                (_, "offset") => "Trials to skip, in the order stored (default 0); the page's total says how many there are.",
                (_, "modelId") => "Only this model's searches.",
                (_, "name") => "The model's name (default: the uploaded file's name).",
                _ => null,
            };
        }
    }

    /// <summary>The artifact downloads: their media types and what each holds.</summary>
    private static void Artifacts(string path, OpenApiOperation operation)
    {
        (string Type, OpenApiSchema Schema, string Description)? artifact = path switch
        {
            "/v1/searches/{id}/manifest" => ("application/json", new OpenApiSchema { Type = JsonSchemaType.Object }, "The assignment manifest; its schema is docs/manifest.schema.json. ETag: the SHA-256; If-None-Match gives 304."),
            "/v1/searches/{id}/frontier" => ("application/json", new OpenApiSchema { Type = JsonSchemaType.Object }, "The size-vs-error Pareto frontier {metric, additiveModel, layers, totalPoints, points[{bytes, averageBits, additiveError, predicted, bits}]}."),
            "/v1/searches/{id}/model" => ("application/octet-stream", new OpenApiSchema { Type = JsonSchemaType.String, Format = "binary" }, "The quantized ONNX model (QDQ)."),
            "/v1/searches/{id}/sensitivity" => ("text/csv", new OpenApiSchema { Type = JsonSchemaType.String }, "One row per layer and candidate width; columns named as the manifest's fields."),
            _ => null,
        };
        if (artifact is not { } a)
        {
            return;
        }

        operation.Responses!["200"] = new OpenApiResponse
        {
            Description = a.Description,
            Content = new Dictionary<string, OpenApiMediaType> { [a.Type] = new() { Schema = a.Schema } },
        };
        operation.Responses.TryAdd("304", new OpenApiResponse { Description = "Not modified: the If-None-Match ETag is current." });
        operation.Responses.TryAdd("404", new OpenApiResponse { Description = "No such search." });
        operation.Responses.TryAdd("409", new OpenApiResponse { Description = "The search has not succeeded (search-not-ready), or, for /model, its budget cannot be met (budget-infeasible)." });
    }
}
