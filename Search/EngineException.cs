namespace Bitbudget.Search;

/// <summary>
/// The one exception family the engine throws for input it cannot work with. <see cref="Code"/> is a
/// stable, kebab-case identifier (for example <c>model-already-quantized</c>) that callers map to a
/// problem type; the message is a sentence a user can act on.
/// </summary>
public class EngineException(string code, string message, Exception? inner = null) : Exception(message, inner)
{
    /// <summary>Stable identifier of the failure cause.</summary>
    public string Code { get; } = code;

    /// <summary>True when running the same request again could succeed (the input is not at fault).</summary>
    public virtual bool Retryable => false;
}
